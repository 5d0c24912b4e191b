"""The demo: an invented harbour-logistics scenario used to show planning and checking."""

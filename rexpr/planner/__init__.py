"""Pushdown planning: split a filter into what a source can run and what stays local."""

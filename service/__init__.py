"""rexpr over HTTP: compile, plan, check and the function catalogue for other services.

Build the application with :func:`service.app.create_app`; run it with :func:`service.server.serve`.
"""

API_PREFIX = "/v1"
API_VERSION = "1"

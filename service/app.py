"""Build the ASGI application: routes, problem handlers, the OpenAPI document and the middleware
(outermost first: request ID and access log, bearer auth, body guard)."""

from __future__ import annotations

from fastapi import FastAPI, Response

from service import API_PREFIX, API_VERSION, handlers
from service.auth import BearerAuth
from service.body_guard import BodyGuard
from service.openapi import build_openapi
from service.request_context import RequestContext
from service.responses import FastJSONResponse, json_bytes
from service.routes import HEALTH_PATH, build_router
from service.settings import ServiceSettings, from_environment
from service.state import ServiceState

OPENAPI_PATH = f"{API_PREFIX}/openapi.json"
PUBLIC_PATHS = frozenset({HEALTH_PATH})


def create_app(settings: ServiceSettings | None = None) -> FastAPI:
    settings = settings or ServiceSettings()
    state = ServiceState(settings)
    # No bundled documentation pages: they would load scripts from elsewhere.
    app = FastAPI(title="rexpr service", version=API_VERSION, openapi_url=None, docs_url=None,
                  redoc_url=None, lifespan=state.lifespan, default_response_class=FastJSONResponse)
    app.state.service = state
    app.include_router(build_router(state))
    handlers.install(app)
    document: list[bytes] = []

    @app.get(OPENAPI_PATH, include_in_schema=False)
    async def openapi_document() -> Response:
        if not document:
            document.append(json_bytes(build_openapi(app, auth=settings.auth_enabled, public_paths=PUBLIC_PATHS)))
        return Response(document[0], media_type="application/json")

    # Starlette wraps in reverse order of addition: the last added runs first.
    app.add_middleware(BodyGuard, max_bytes=settings.max_body_bytes, max_depth=settings.max_json_depth)
    if settings.auth_enabled:
        app.add_middleware(BearerAuth, tokens=settings.tokens, public_paths=PUBLIC_PATHS)
    app.add_middleware(RequestContext, access_log=settings.access_log)
    return app


def app_from_environment() -> FastAPI:
    """The factory the server runs in each worker: settings from the environment."""
    return create_app(from_environment())

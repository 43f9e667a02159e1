"""``/api/v1/``: the operations of :mod:`api.endpoints`, the OpenAPI schema (``openapi.json``) and its docs page
(``docs``, Swagger UI from django-ninja's own static files: "ninja" is in INSTALLED_APPS).

The API authenticates by token, not by session: its views are exempt from the site-wide LoginRequiredMiddleware
(a redirect to the sign-in page means nothing to a script); the schema and the docs page are public.
"""

from __future__ import annotations

from typing import Any

from django.contrib.auth.decorators import login_not_required
from django.urls import URLPattern, URLResolver, include, path
from ninja import NinjaAPI, Swagger

from api import endpoints, errors
from api.auth import TokenAuth

api_v1 = NinjaAPI(
    title="Evenframe API",
    version="1",
    description="Campaigns, frames and assets of your teams. Authenticate with a personal token from your profile "
    "page: `Authorization: Bearer ef_…`.",
    auth=TokenAuth(),
    urls_namespace="api-v1",
    # validatorUrl null: Swagger UI would otherwise send the schema to validator.swagger.io for its badge.
    docs=Swagger(settings={"validatorUrl": None}),
)
errors.install(api_v1)
api_v1.add_router("/", endpoints.router)


def _login_not_required(patterns: list[Any]) -> None:
    for entry in patterns:
        if isinstance(entry, URLResolver):
            _login_not_required(entry.url_patterns)
        elif isinstance(entry, URLPattern):
            login_not_required(entry.callback)  # sets the attribute LoginRequiredMiddleware reads


_patterns, _app_name, _namespace = api_v1.urls
_login_not_required(_patterns)
urlpatterns = [path("", include((_patterns, _app_name), namespace=_namespace))]

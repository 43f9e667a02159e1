"""Every API error is JSON ``{"detail": text, "errors": {input: message}}``: bad input 400 (the service's
:class:`~campaigns.services.CampaignError` on the input it names, or the request's shape), no or a bad token 401,
too low a role 403, not found or another team's 404."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from django.core.exceptions import PermissionDenied
from django.http import Http404, HttpRequest, HttpResponse
from ninja import NinjaAPI
from ninja.errors import AuthenticationError, HttpError, ValidationError

from campaigns.services import CampaignError
from evenframe.inputs import InputError

# Where a request value came from, the first element of a pydantic error's location.
_SOURCES = {"body", "query", "path", "header", "cookie", "form", "file"}


class ApiError(Exception):
    def __init__(self, status: int, detail: str, errors: Mapping[str, str] | None = None) -> None:
        super().__init__(detail)
        self.status = status
        self.detail = detail
        self.errors = dict(errors or {})


def campaign_error_fields(exc: CampaignError) -> dict[str, str]:
    """The input a CampaignError names, as the API's field key: ``name``, ``cost_budget``,
    ``quotas.<class_name>.<column>``, ``budget.<section>.<name>[.<part>]``; empty for the request as a whole."""
    if exc.field == "quota" and exc.class_name is not None:
        return {f"quotas.{exc.class_name}.{exc.column or 'target_accepted'}": exc.message}
    if exc.field == "budget" and exc.budget_field:
        return {"budget." + ".".join(p for p in exc.budget_field if p): exc.detail}
    return {exc.field: exc.message} if exc.field else {}


def validation_error_fields(errors: list[dict[str, Any]]) -> dict[str, str]:
    """pydantic's errors by input: ``name``, ``quotas.0.target_accepted``, ``limit``, ``class`` (a query alias)."""
    out: dict[str, str] = {}
    for error in errors:
        loc = [str(part) for part in error.get("loc", ())]
        source = loc.pop(0) if loc and loc[0] in _SOURCES else ""
        if source == "body" and loc:
            loc.pop(0)  # the operation's parameter name ("payload"), not part of the client's JSON
        key = ".".join(loc) or source or "request"
        out.setdefault(key, str(error.get("msg", "invalid")))
    return out


def _json(api: NinjaAPI, request: HttpRequest, status: int, detail: str, errors: Mapping[str, str]) -> HttpResponse:
    return api.create_response(request, {"detail": detail, "errors": dict(errors)}, status=status)


def install(api: NinjaAPI) -> None:
    """Register the handlers on ``api`` (``exc`` is typed Any: ninja's stub expects the exception or its class)."""

    def api_error(request: HttpRequest, exc: Any) -> HttpResponse:
        return _json(api, request, exc.status, exc.detail, exc.errors)

    def input_error(request: HttpRequest, exc: Any) -> HttpResponse:
        fields = (
            campaign_error_fields(exc)
            if isinstance(exc, CampaignError)
            else ({exc.field: exc.message} if exc.field else {})
        )
        return _json(api, request, 400, str(exc), fields)

    def validation_error(request: HttpRequest, exc: Any) -> HttpResponse:
        fields = validation_error_fields(list(exc.errors))
        detail = "; ".join(f"{k}: {v}" for k, v in fields.items()) or "invalid request"
        return _json(api, request, 400, detail, fields)

    def http_error(request: HttpRequest, exc: Any) -> HttpResponse:
        return _json(api, request, exc.status_code, str(exc), {})

    def unauthorized(request: HttpRequest, exc: Any) -> HttpResponse:
        response = _json(api, request, 401, "a valid API token is required (Authorization: Bearer ef_…)", {})
        response["WWW-Authenticate"] = "Bearer"
        return response

    def forbidden(request: HttpRequest, exc: Any) -> HttpResponse:
        return _json(api, request, 403, str(exc) or "forbidden", {})

    def not_found(request: HttpRequest, exc: Any) -> HttpResponse:
        return _json(api, request, 404, "not found", {})

    api.add_exception_handler(ApiError, api_error)
    api.add_exception_handler(InputError, input_error)
    api.add_exception_handler(ValidationError, validation_error)
    api.add_exception_handler(HttpError, http_error)
    api.add_exception_handler(AuthenticationError, unauthorized)
    api.add_exception_handler(PermissionDenied, forbidden)
    api.add_exception_handler(Http404, not_found)

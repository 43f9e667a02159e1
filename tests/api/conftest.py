"""Fixtures for the API tests: the dashboard's people (viewer, planner, admin in one team; an outsider), object
classes and campaigns (re-exported from tests/dashboard/conftest.py), and tokens for them."""

from __future__ import annotations

import pytest

from tests.dashboard.conftest import (  # noqa: F401 - fixtures, found by name
    TINY_BUDGET,
    done_campaign,
    make_campaign,
    object_classes,
    outbox,
    people,
    rendered_frames,
)


@pytest.fixture
def token_for(people):  # noqa: F811 - the fixture imported above
    """``token_for("pia")``: a fresh token of that person (its plaintext)."""
    from api import services

    def make(username: str, name: str = "tests") -> str:
        return services.create_token(user=people[username], name=name)[1]

    return make


@pytest.fixture
def api(client, token_for):
    """``api("pia").get(path)`` / ``.post(path, json)``: calls under /api/v1/ with that person's token."""

    class Caller:
        def __init__(self, token: str) -> None:
            self.headers = {"Authorization": f"Bearer {token}"}

        def get(self, path: str, **params):
            return client.get(f"/api/v1{path}", params, headers=self.headers)

        def post(self, path: str, body=None):
            return client.post(
                f"/api/v1{path}",
                body if body is not None else {},
                content_type="application/json",
                headers=self.headers,
            )

    return lambda username: Caller(token_for(username))

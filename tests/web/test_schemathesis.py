"""The HTTP API against its own OpenAPI document (schemathesis: generated requests, every
response checked for status codes, content types and schemas as documented), on the running
service of the shipped scenario. Once without credentials, once signed in."""

from __future__ import annotations

import importlib.resources

import hypothesis
import pytest
import schemathesis

from tests.web.conftest import WebSite

DOC = importlib.resources.files("thermowarden") / "schemas" / "openapi.yaml"
schema = schemathesis.openapi.from_path(str(DOC))
SETTINGS = hypothesis.settings(max_examples=25, deadline=None, derandomize=True,
                               suppress_health_check=list(hypothesis.HealthCheck),
                               database=None)


@pytest.mark.broker
@schema.parametrize()
@SETTINGS
def test_api_without_credentials(case, web_site: WebSite):
    case.call_and_validate(base_url=web_site.base)


@pytest.fixture(scope="module")
def ivo_token(web_site: WebSite) -> str:
    return web_site.token("ivo")


@pytest.mark.broker
@schema.exclude(operation_id="signOut").parametrize()
@SETTINGS
def test_api_signed_in(case, web_site: WebSite, ivo_token: str):
    case.call_and_validate(base_url=web_site.base,
                           headers={"Authorization": f"Bearer {ivo_token}"})

"""The OpenAPI document describes the token scheme (OpenAPI 3 'http' security scheme with 'bearer'), and is
served only to callers with a project token or a session (RFC 9110: 401 without credentials)."""

from __future__ import annotations

import pytest
from django.contrib.auth.models import User
from drf_spectacular.generators import SchemaGenerator
from rest_framework.test import APIClient

from ingest.models import ApiToken, Project

SCHEMA_URL = "/api/schema/"


def test_schema_declares_the_bearer_token_and_every_api_path():
    schema = SchemaGenerator().get_schema(request=None, public=True)
    # OpenAPI 3.0.3 §4.7.33 (Security Scheme Object): type "http", scheme "bearer".
    assert schema["components"]["securitySchemes"]["projectToken"] == {
        "type": "http", "scheme": "bearer",
        "description": "Per-project API token (created in the admin site), sent as `Authorization: Bearer <key>`.",
    }
    assert "/api/v1/projects/{slug}/results/" in schema["paths"]


@pytest.mark.django_db
def test_schema_is_not_served_to_anonymous_callers():
    response = APIClient().get(SCHEMA_URL)
    # RFC 9110 §15.5.2: 401 with a challenge when the first authentication class declares one (Bearer).
    assert response.status_code == 401 and response["WWW-Authenticate"] == "Bearer"
    assert b"/api/v1/projects/" not in response.content


@pytest.mark.django_db
def test_schema_is_served_with_a_project_token_or_a_session():
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    with_token = APIClient()
    with_token.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='ci')[1]}")
    with_session = APIClient()
    with_session.force_login(User.objects.create_user("vera", password="pw-vera"))
    for client in (with_token, with_session):
        response = client.get(SCHEMA_URL)
        assert response.status_code == 200 and b"/api/v1/projects/{slug}/results/" in response.content

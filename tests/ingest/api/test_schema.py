"""The OpenAPI document describes the token scheme (OpenAPI 3 'http' security scheme with 'bearer')."""

from __future__ import annotations

from drf_spectacular.generators import SchemaGenerator


def test_schema_declares_the_bearer_token_and_every_api_path():
    schema = SchemaGenerator().get_schema(request=None, public=True)
    # OpenAPI 3.0.3 §4.7.33 (Security Scheme Object): type "http", scheme "bearer".
    assert schema["components"]["securitySchemes"]["projectToken"] == {
        "type": "http", "scheme": "bearer",
        "description": "Per-project API token (created in the admin site), sent as `Authorization: Bearer <key>`.",
    }
    assert "/api/v1/projects/{slug}/results/" in schema["paths"]

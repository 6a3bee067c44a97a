"""API clients for the analytics API tests: a project token, or a signed-in viewer or triager session."""

from __future__ import annotations

from django.contrib.auth.models import Permission, User
from rest_framework.test import APIClient

from ingest.models import ApiToken


def token_client_for(project) -> APIClient:
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='ci')[1]}")
    return client


def session_client(*, triager: bool) -> APIClient:
    user = User.objects.create_user("ines" if triager else "viewer", password="x")
    if triager:
        user.user_permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))
    client = APIClient()
    client.force_login(user)
    return client

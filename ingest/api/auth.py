"""Per-project API tokens: ``Authorization: Bearer <key>``; only a SHA-256 hash of the key is stored."""

from __future__ import annotations

from django.utils import timezone
from drf_spectacular.extensions import OpenApiAuthenticationExtension
from rest_framework import authentication, exceptions, permissions

from ingest.models import ApiToken


class TokenPrincipal:
    """The caller behind a project token (not a person)."""

    is_authenticated = True
    is_anonymous = False
    is_staff = False
    pk = None

    def __init__(self, token: ApiToken):
        self.token = token
        self.project_id = token.project_id

    def __str__(self) -> str:
        return f"token:{self.token.name}"


class ProjectTokenAuthentication(authentication.BaseAuthentication):
    keyword = "Bearer"

    def authenticate(self, request):
        header = authentication.get_authorization_header(request).decode("latin-1")
        if not header:
            return None
        parts = header.split()
        if len(parts) != 2 or parts[0] != self.keyword:
            raise exceptions.AuthenticationFailed("Authorization header must be 'Bearer <token>'.")
        token = (
            ApiToken.objects.select_related("project")
            .filter(key_hash=ApiToken.hash_key(parts[1]), revoked=False)
            .first()
        )
        if token is None:
            raise exceptions.AuthenticationFailed("Unknown or revoked API token.")
        ApiToken.objects.filter(pk=token.pk).update(last_used_at=timezone.now())
        return TokenPrincipal(token), token

    def authenticate_header(self, request) -> str:
        return self.keyword


class ProjectAccess(permissions.BasePermission):
    """A token may act only on its own project; signed-in people may act on any project."""

    message = "This token does not belong to the project in the URL."

    def has_permission(self, request, view) -> bool:
        user = request.user
        if not (user and user.is_authenticated):
            return False
        if isinstance(user, TokenPrincipal):
            return user.token.project.slug == view.kwargs.get("slug")
        return True


class ProjectTokenScheme(OpenApiAuthenticationExtension):
    """Describes the project token in the OpenAPI schema (registered by subclassing)."""

    target_class = ProjectTokenAuthentication
    name = "projectToken"

    def get_security_definition(self, auto_schema):
        return {"type": "http", "scheme": "bearer",
                "description": "Per-project API token (created in the admin site), sent as `Authorization: Bearer <key>`."}

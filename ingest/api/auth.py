"""Per-project API tokens: ``Authorization: Bearer <key>``; only a SHA-256 hash of the key is stored."""

from __future__ import annotations

from django.utils import timezone
from drf_spectacular.extensions import OpenApiAuthenticationExtension
from rest_framework import authentication, exceptions, permissions

from analytics.services.triage import triage_allowed
from ingest.models import ApiToken

ERR_FOREIGN_TOKEN = "This token does not belong to the project in the URL."
ERR_CANNOT_IMPORT = (
    "Importing needs a token of this project, a staff account or the triage permission (group 'triagers')."
)


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

    message = ERR_FOREIGN_TOKEN

    def has_permission(self, request, view) -> bool:
        user = request.user
        if not (user and user.is_authenticated):
            return False
        if isinstance(user, TokenPrincipal):
            return user.token.project.slug == view.kwargs.get("slug")
        return True


def can_import(user) -> bool:
    """A person who may import or retry imports: staff, or holding ``analytics.triage`` (never a token)."""
    if isinstance(user, TokenPrincipal) or not (user and user.is_authenticated):
        return False
    return bool(user.is_staff or triage_allowed(user))


class CanImport(ProjectAccess):
    """Imports change the data everyone's figures come from: a token of the project, staff or a triager.

    A signed-in viewer (no group, not staff) may read through the API but not import, as on the web pages.
    """

    def has_permission(self, request, view) -> bool:
        self.message = ERR_FOREIGN_TOKEN
        if not super().has_permission(request, view):
            return False
        if isinstance(request.user, TokenPrincipal):
            return True
        self.message = ERR_CANNOT_IMPORT
        return can_import(request.user)


class ProjectTokenScheme(OpenApiAuthenticationExtension):
    """Describes the project token in the OpenAPI schema (registered by subclassing)."""

    target_class = ProjectTokenAuthentication
    name = "projectToken"

    def get_security_definition(self, auto_schema):
        return {"type": "http", "scheme": "bearer",
                "description": "Per-project API token (created in the admin site), sent as `Authorization: Bearer <key>`."}

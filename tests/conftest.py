import pytest
from django.contrib.auth.models import Group, Permission, User
from django.test import Client


@pytest.fixture(name="project")
def project_fixture(db):
    """The project most page and API tests work in."""
    from ingest.models import Project

    return Project.objects.create(slug="berthwise", name="Berthwise")


@pytest.fixture(name="viewer")
def viewer_fixture(db):
    """A signed-in user with no permissions: may read every page."""
    return User.objects.create_user("vera", password="pw-vera")


@pytest.fixture(name="triager")
def triager_fixture(db):
    """A member of the "triagers" group, which holds analytics.triage."""
    user = User.objects.create_user("tomas", password="pw-tomas")
    group, _ = Group.objects.get_or_create(name="triagers")
    group.permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))
    user.groups.add(group)
    return user


@pytest.fixture(autouse=True)
def _media_root(settings, tmp_path):
    """Each test stores its raw uploads in its own folder."""
    settings.MEDIA_ROOT = str(tmp_path / "media")


@pytest.fixture
def viewer_client(viewer) -> Client:
    """A test client signed in as the viewer."""
    client = Client()
    client.force_login(viewer)
    return client


@pytest.fixture
def triager_client(triager) -> Client:
    """A test client signed in as the triager."""
    client = Client()
    client.force_login(triager)
    return client

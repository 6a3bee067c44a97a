import pytest


@pytest.fixture(autouse=True)
def _media_root(settings, tmp_path):
    """Each test stores its raw uploads in its own folder."""
    settings.MEDIA_ROOT = str(tmp_path / "media")

import pytest

from tests.analytics.api.clients import token_client_for


@pytest.fixture
def token_client(project):
    """An API client holding a token of the test module's ``project``."""
    return token_client_for(project)

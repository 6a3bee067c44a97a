"""Dashboard pages of the analytics app. Each module owns the ``urlpatterns`` of one page family,
mounted under ``/p/<slug>/`` by config/urls.py."""

"""Refusals and missing pages explain themselves inside the site's frame instead of a bare status line."""

from __future__ import annotations

import pytest
from django.contrib.auth.models import User

from ingest.models import Project


@pytest.mark.django_db
def test_a_viewer_refused_an_upload_sees_why_and_where_to_go(client):
    Project.objects.create(slug="p", name="P")
    client.force_login(User.objects.create_user("v", password="x"))
    response = client.get("/p/p/imports/defects/upload/")
    assert response.status_code == 403
    body = response.content.decode()
    assert "Not allowed" in body and "Ask an admin" in body and 'href="/"' in body


@pytest.mark.django_db
def test_an_unknown_project_gives_the_sites_not_found_page(client):
    client.force_login(User.objects.create_user("v", password="x"))
    response = client.get("/p/nope/")
    assert response.status_code == 404 and "There is nothing at this address" in response.content.decode()


@pytest.mark.django_db
def test_admin_site_carries_the_products_name(admin_client):
    assert "Barometer administration" in admin_client.get("/admin/").content.decode()

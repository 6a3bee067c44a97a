"""Benchmark databases: create, migrate, and set up Django inside a benchmark process."""

from __future__ import annotations

import os
import subprocess

from bench.config import PYTHON, ROOT, django_env


def pg_database_create(name: str, *, drop: bool = False) -> None:
    """Create ``name`` owned by the barometer role (dropping it first when ``drop``)."""
    def psql(sql: str) -> subprocess.CompletedProcess:
        return subprocess.run(
            ["psql", "-h", "127.0.0.1", "-U", "postgres", "-v", "ON_ERROR_STOP=1", "-qAtc", sql],
            capture_output=True, text=True,
        )

    if drop:
        psql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
    exists = psql(f"SELECT 1 FROM pg_database WHERE datname = '{name}'").stdout.strip() == "1"
    if not exists:
        result = psql(f'CREATE DATABASE "{name}" OWNER barometer')
        if result.returncode != 0:
            raise RuntimeError(f"could not create database {name}: {result.stderr.strip()}")


def migrate(database_url: str) -> None:
    subprocess.run(
        [PYTHON, "manage.py", "migrate", "--noinput", "-v", "0"], cwd=ROOT, env=django_env(database_url), check=True
    )


def django_setup() -> None:
    """Call inside a benchmark process started with :func:`bench.config.django_env`."""
    import django

    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings.base")
    django.setup()


def project_ensure(components_json) -> int:
    """The project with its components and classname rules, as load_demo sets it up; returns its id."""
    import json

    from ingest.models import Component, ComponentRule, Project
    from ingest.services.components import components_apply_rules

    layout = json.loads(open(components_json, encoding="utf-8").read())
    info = layout["project"]
    project, _ = Project.objects.get_or_create(slug=info["slug"], defaults={"name": info["name"]})
    for entry in layout["components"]:
        component, _ = Component.objects.get_or_create(project=project, name=entry["name"])
        for prefix in entry.get("classname_prefixes", []):
            ComponentRule.objects.update_or_create(
                project=project, classname_prefix=prefix, defaults={"component": component}
            )
    components_apply_rules(project=project)
    return project.pk


def use_database(name: str) -> None:
    """Point Django's default connection at another database of the same server (closing the old one)."""
    from django.db import connection

    if connection.settings_dict["NAME"] == name:
        return
    connection.close()
    connection.settings_dict["NAME"] = name


def pg_analyze(name: str) -> None:
    """VACUUM ANALYZE a benchmark database: what autovacuum does on a production server after a bulk load.

    This server runs with ``autovacuum = off``; without statistics the planner misjudges the rollup table
    and some page queries take seconds instead of milliseconds (see RESULTS.md).
    """
    subprocess.run(["psql", "-h", "127.0.0.1", "-U", "postgres", "-d", name, "-qc", "VACUUM ANALYZE"], check=True)


def pg_setting(name: str) -> str:
    out = subprocess.run(["psql", "-h", "127.0.0.1", "-U", "postgres", "-qAtc", f"SHOW {name}"],
                         capture_output=True, text=True)
    return out.stdout.strip() or "?"

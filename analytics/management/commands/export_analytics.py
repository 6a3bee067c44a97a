"""python manage.py export_analytics --project SLUG --what flaky|failures|clusters|forecast --format json|csv

Writes to stdout the rows other tools rely on. Each ``--what`` is produced by one service function
(keyword-only, returns a list of flat dicts); CSV goes through the injection-safe writer.
"""

from __future__ import annotations

import io
import json
from datetime import date
from importlib import import_module

from django.core.management.base import BaseCommand, CommandError
from django.core.serializers.json import DjangoJSONEncoder

from barometer_common.csvsafe import write_safe_csv
from ingest.models import Project

# --what → "module:function"; the function takes project=… plus the options it declares.
EXPORTERS = {
    "flaky": "analytics.services.flaky:flaky_export_rows",
    "failures": "analytics.services.clusters:failures_export_rows",
    "clusters": "analytics.services.clusters:clusters_export_rows",
    "forecast": "analytics.services.forecasts:forecast_export_rows",
}


def exporter(what: str):
    module, func = EXPORTERS[what].split(":")
    return getattr(import_module(module), func)


class Command(BaseCommand):
    help = "Write flaky-test scores, failures, failure causes or defect forecasts to stdout as JSON or CSV."

    def add_arguments(self, parser):
        parser.add_argument("--project", required=True)
        parser.add_argument("--what", required=True, choices=sorted(EXPORTERS))
        parser.add_argument("--format", default="json", choices=["json", "csv"])
        parser.add_argument("--horizon-weeks", type=int, default=None, help="forecast only (default 12)")
        parser.add_argument("--as-of", type=date.fromisoformat, default=None,
                            help="forecast only: use only defects created before this date (YYYY-MM-DD)")

    def handle(self, *args, **opts):
        project = Project.objects.filter(slug=opts["project"]).first()
        if project is None:
            raise CommandError(f"no project with slug {opts['project']!r}")
        extra = {}
        if opts["what"] == "forecast":
            horizon = opts["horizon_weeks"] if opts["horizon_weeks"] is not None else 12
            extra = {"horizon_weeks": horizon, "as_of": opts["as_of"]}
        elif opts["horizon_weeks"] is not None or opts["as_of"] is not None:
            raise CommandError("--horizon-weeks and --as-of apply to --what forecast only")
        try:
            rows = exporter(opts["what"])(project=project, **extra)
        except ValueError as exc:
            raise CommandError(str(exc)) from exc
        if opts["format"] == "json":
            self.stdout.write(json.dumps(rows, cls=DjangoJSONEncoder, indent=1))
        else:
            fields = list(rows[0]) if rows else []
            buffer = io.StringIO()
            write_safe_csv(buffer, fields, ([row.get(f) for f in fields] for row in rows))
            self.stdout.write(buffer.getvalue(), ending="")

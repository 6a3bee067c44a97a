"""Re-parse stored uploads (after a parser fix) or retry failed imports."""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from ingest.models import Build, ImportJob
from ingest.services.results import ResultsImportError, build_results_reset, results_job_run


class Command(BaseCommand):
    help = "Retry failed result imports (--failed) or re-parse the stored files of builds (--build / --job)."

    def add_arguments(self, parser):
        parser.add_argument("--project", required=True)
        parser.add_argument("--failed", action="store_true", help="Retry every failed results import.")
        parser.add_argument("--job", type=int, action="append", default=[], help="Re-run this job (repeatable).")
        parser.add_argument("--build", action="append", default=[], help="Re-parse every upload of this build.")

    def handle(self, *args, **opts):
        jobs = ImportJob.objects.filter(project__slug=opts["project"], kind=ImportJob.Kind.RESULTS)
        selected: list[ImportJob] = []
        if opts["failed"]:
            selected += list(jobs.filter(status=ImportJob.Status.FAILED).order_by("created_at"))
        for build_id in opts["build"]:
            build = Build.objects.filter(project__slug=opts["project"], external_id=build_id).first()
            if build is None:
                raise CommandError(f"build {build_id!r} not found in project {opts['project']!r}")
            with transaction.atomic():
                selected += build_results_reset(build=build)
        selected += list(jobs.filter(pk__in=opts["job"]))
        if not selected:
            raise CommandError("nothing selected: give --failed, --job N or --build ID")
        failures = 0
        for job in selected:
            if job.status == ImportJob.Status.FAILED and not ImportJob.objects.filter(
                pk=job.pk, status=ImportJob.Status.FAILED
            ).update(status=ImportJob.Status.QUEUED):
                self.stdout.write(f"job {job.pk}: skipped, someone else retried it meanwhile")
                continue
            try:
                counts = results_job_run(job=job)
                self.stdout.write(f"job {job.pk}: done, {counts.tests} results")
            except ResultsImportError as exc:
                failures += 1
                self.stdout.write(f"job {job.pk}: failed: {exc}")
        if failures:
            raise CommandError(f"{failures} of {len(selected)} jobs failed")

from datetime import date

from django import forms
from django.contrib import admin, messages

from ingest import models
from ingest.services.results import project_weeks_rebuild, rollup_rebuild
from ingest.tasks import job_enqueue


class _RebuildsRollupsOnDelete:
    """Admin deletes recompute the weekly rollups they touch (the rollups are kept by ingest, not by cascades).

    ``_rollup_scopes`` gives (project id, week) pairs: a week rebuilds both rollups of that week, ``None``
    only the per-component totals of the project (the default: deleting tests or components moves tests out
    of their component totals, whatever the week).
    """

    def _rollup_scopes(self, queryset) -> set[tuple[int, date | None]]:
        return {(project_id, None) for project_id in queryset.values_list("project_id", flat=True).distinct()}

    def delete_model(self, request, obj):
        scopes = self._rollup_scopes(type(obj).objects.filter(pk=obj.pk))
        super().delete_model(request, obj)
        _rollups_rebuild(scopes)

    def delete_queryset(self, request, queryset):
        scopes = self._rollup_scopes(queryset)
        super().delete_queryset(request, queryset)
        _rollups_rebuild(scopes)


def _rollups_rebuild(scopes: set[tuple[int, date | None]]) -> None:
    projects = models.Project.objects.in_bulk({project_id for project_id, _ in scopes})
    for project_id, week in sorted(scopes, key=lambda s: (s[0], s[1] or date.min)):
        if project_id not in projects:
            continue
        if week is None:
            project_weeks_rebuild(project_id=project_id)
        else:
            rollup_rebuild(project=projects[project_id], week=week)


@admin.register(models.Project)
class ProjectAdmin(admin.ModelAdmin):
    list_display = ("slug", "name", "created_at")
    prepopulated_fields = {"slug": ("name",)}


@admin.register(models.Component)
class ComponentAdmin(_RebuildsRollupsOnDelete, admin.ModelAdmin):
    list_display = ("name", "project")
    list_filter = ("project",)


@admin.register(models.ComponentAlias)
class ComponentAliasAdmin(admin.ModelAdmin):
    list_display = ("alias", "component", "project")
    list_filter = ("project",)


@admin.register(models.ComponentRule)
class ComponentRuleAdmin(admin.ModelAdmin):
    list_display = ("classname_prefix", "component", "project")
    list_filter = ("project",)


@admin.register(models.TestCase)
class TestCaseAdmin(_RebuildsRollupsOnDelete, admin.ModelAdmin):
    list_display = ("classname", "name", "component", "component_locked", "project")
    list_filter = ("project", "component")
    search_fields = ("classname", "name")
    list_select_related = ("component", "project")

    def save_model(self, request, obj, form, change):
        if "component" in form.changed_data:
            obj.component_locked = True
        super().save_model(request, obj, form, change)
        if change and "component" in form.changed_data:
            project_weeks_rebuild(project_id=obj.project_id)  # the weekly totals are kept per component


@admin.register(models.Build)
class BuildAdmin(_RebuildsRollupsOnDelete, admin.ModelAdmin):
    list_display = ("external_id", "project", "branch", "commit", "ci_job", "started_at")
    list_filter = ("project", "branch")
    search_fields = ("external_id", "commit")

    def _rollup_scopes(self, queryset):
        return set(queryset.values_list("project_id", "week").distinct())


@admin.register(models.ApiToken)
class ApiTokenAdmin(admin.ModelAdmin):
    list_display = ("name", "project", "key_prefix", "created_at", "last_used_at", "revoked")
    list_filter = ("project", "revoked")
    fields = ("project", "name", "revoked", "key_prefix", "created_at", "last_used_at")
    readonly_fields = ("key_prefix", "created_at", "last_used_at")

    def save_model(self, request, obj, form, change):
        if change:
            return super().save_model(request, obj, form, change)
        token, key = models.ApiToken.issue(project=obj.project, name=obj.name)
        obj.pk = token.pk
        self.message_user(
            request, f"New token for {obj.project}: {key} — copy it now, it is not shown again.", messages.WARNING
        )


@admin.action(description="Retry the selected failed imports")
def retry_imports(modeladmin, request, queryset):
    count = 0
    for job in queryset.filter(status=models.ImportJob.Status.FAILED):
        # Claim the job with one conditional update, so a concurrent retry (page, admin, CLI) cannot queue it twice.
        claimed = models.ImportJob.objects.filter(pk=job.pk, status=models.ImportJob.Status.FAILED).update(
            status=models.ImportJob.Status.QUEUED, enqueued_at=None)
        if claimed:
            count += job_enqueue(job)
    modeladmin.message_user(request, f"{count} job(s) queued again.")


@admin.register(models.ImportJob)
class ImportJobAdmin(admin.ModelAdmin):
    list_display = ("id", "project", "kind", "status", "original_name", "created_at", "finished_at")
    list_filter = ("project", "kind", "status")
    actions = [retry_imports]
    readonly_fields = ("counts", "warnings", "row_errors", "error", "sha256", "size")


class DefectColumnMapForm(forms.ModelForm):
    class Meta:
        model = models.DefectColumnMap
        fields = ("project", "name", "definition")

    def clean_definition(self):
        """The same validation as the CLI and the API: a broken map is refused with the bad key named."""
        from ingest.parsers.defects import ColumnMap, ColumnMapError

        definition = self.cleaned_data["definition"]
        try:
            ColumnMap.from_dict(definition)
        except ColumnMapError as exc:
            raise forms.ValidationError(str(exc)) from exc
        return definition


@admin.register(models.DefectColumnMap)
class DefectColumnMapAdmin(admin.ModelAdmin):
    form = DefectColumnMapForm
    list_display = ("name", "project", "updated_at")


@admin.register(models.Defect)
class DefectAdmin(admin.ModelAdmin):
    list_display = ("key", "title", "status", "severity", "created_at", "resolved_at")
    list_filter = ("project", "is_closed")
    search_fields = ("key", "title")

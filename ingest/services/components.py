"""Component resolution: classname rules for test cases, aliases for defect exports."""

from __future__ import annotations

from django.db import transaction

from ingest.models import Component, ComponentAlias, ComponentRule, Project, TestCase, normalise_alias


class ComponentRules:
    """Longest-prefix match of a test's classname against the project's rules (loaded once)."""

    def __init__(self, project: Project):
        self._rules = sorted(
            ComponentRule.objects.filter(project=project).values_list("classname_prefix", "component_id"),
            key=lambda r: len(r[0]),
            reverse=True,
        )

    def component_id_for(self, classname: str) -> int | None:
        for prefix, component_id in self._rules:
            if classname.startswith(prefix):
                return component_id
        return None


def components_apply_rules(*, project: Project) -> int:
    """Re-assign every unlocked test case of ``project`` from the current rules; returns how many changed.

    Rebuilds the per-component weekly totals when any test moved.
    """
    from ingest.services.results import project_weeks_rebuild  # results imports this module

    rules = ComponentRules(project)
    changed = []
    for tc in TestCase.objects.filter(project=project, component_locked=False).only("id", "classname", "component_id"):
        new = rules.component_id_for(tc.classname)
        if new != tc.component_id:
            tc.component_id = new
            changed.append(tc)
    with transaction.atomic():  # the components and the per-component totals change together
        TestCase.objects.bulk_update(changed, ["component"], batch_size=2000)
        if changed:
            project_weeks_rebuild(project_id=project.pk)
    return len(changed)


class ComponentResolver:
    """Resolve a component name from an export: exact name, then alias, else create the component."""

    def __init__(self, project: Project):
        self.project = project
        self._by_name = {normalise_alias(c.name): c for c in Component.objects.filter(project=project)}
        for alias in ComponentAlias.objects.filter(project=project).select_related("component"):
            self._by_name.setdefault(alias.alias, alias.component)
        self.created: list[str] = []

    def resolve(self, name: str) -> Component:
        norm = normalise_alias(name)
        comp = self._by_name.get(norm)
        if comp is None:
            comp, _ = Component.objects.get_or_create(project=self.project, name=" ".join(name.split()))
            self._by_name[norm] = comp
            self.created.append(comp.name)
        return comp

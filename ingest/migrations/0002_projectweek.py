"""Per-project, per-week, per-component totals of the weekly rollup, backfilled from ``ingest_testweek``."""

import django.db.models.deletion
from django.db import migrations, models


# Frozen copy of the rebuild in ingest.services.results (a migration must not change when that code does).
BACKFILL = """
INSERT INTO ingest_projectweek (project_id, week, component_key, tests, runs, passed, failed, errors, skipped,
                                reruns, duration_total, duration_count)
SELECT w.project_id, w.week, COALESCE(c.component_id, 0), SUM(CASE WHEN w.runs > 0 THEN 1 ELSE 0 END),
       SUM(w.runs), SUM(w.passed), SUM(w.failed), SUM(w.errors), SUM(w.skipped), SUM(w.reruns),
       SUM(w.duration_total), SUM(w.duration_count)
FROM ingest_testweek w JOIN ingest_testcase c ON c.id = w.test_case_id
GROUP BY w.project_id, w.week, COALESCE(c.component_id, 0)
"""


class Migration(migrations.Migration):

    dependencies = [
        ('ingest', '0001_initial'),
    ]

    operations = [
        migrations.CreateModel(
            name='ProjectWeek',
            fields=[
                ('id', models.BigAutoField(auto_created=True, primary_key=True, serialize=False, verbose_name='ID')),
                ('week', models.DateField()),
                ('component_key', models.BigIntegerField(default=0)),
                ('tests', models.IntegerField(default=0)),
                ('runs', models.IntegerField(default=0)),
                ('passed', models.IntegerField(default=0)),
                ('failed', models.IntegerField(default=0)),
                ('errors', models.IntegerField(default=0)),
                ('skipped', models.IntegerField(default=0)),
                ('reruns', models.IntegerField(default=0)),
                ('duration_total', models.FloatField(default=0.0)),
                ('duration_count', models.IntegerField(default=0)),
                ('project', models.ForeignKey(on_delete=django.db.models.deletion.CASCADE, related_name='+', to='ingest.project')),
            ],
            options={
                'constraints': [models.UniqueConstraint(fields=('project', 'week', 'component_key'), name='uniq_project_week_component')],
            },
        ),
        migrations.RunSQL(BACKFILL, reverse_sql=migrations.RunSQL.noop),
    ]

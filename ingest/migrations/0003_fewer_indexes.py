"""Fewer indexes on the results side: the single-column foreign-key indexes that composite indexes cover, the
LIKE index on signatures, and the rollup's foreign-key constraints (derived rows: see TestWeek).

On PostgreSQL every step drops an index or a constraint (quick, but under a short exclusive lock); on SQLite each
changed foreign key copies its table once, so a large SQLite database takes a while to migrate."""

import django.db.models.deletion
from django.db import migrations, models


# PostgreSQL only: the LIKE (varchar_pattern_ops) index Django adds beside the signature index. Signatures are
# only ever compared for equality; the plain index stays as it is (no rebuild of the largest table).
SIGNATURE_LIKE = "ingest_testresult_signature_fe3d509d_like"


def signature_like_index_drop(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(f"DROP INDEX IF EXISTS {SIGNATURE_LIKE}")


def signature_like_index_create(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(
            f"CREATE INDEX IF NOT EXISTS {SIGNATURE_LIKE} ON ingest_testresult (signature varchar_pattern_ops)"
        )


class Migration(migrations.Migration):

    dependencies = [
        ('ingest', '0002_projectweek'),
    ]

    operations = [
        migrations.AlterField(
            model_name='testcase',
            name='project',
            field=models.ForeignKey(db_index=False, on_delete=django.db.models.deletion.CASCADE, related_name='test_cases', to='ingest.project'),
        ),
        migrations.AlterField(
            model_name='testresult',
            name='build',
            field=models.ForeignKey(db_index=False, on_delete=django.db.models.deletion.CASCADE, related_name='results', to='ingest.build'),
        ),
        migrations.AlterField(
            model_name='testresult',
            name='project',
            field=models.ForeignKey(db_index=False, on_delete=django.db.models.deletion.CASCADE, related_name='+', to='ingest.project'),
        ),
        migrations.AlterField(
            model_name='testresult',
            name='test_case',
            field=models.ForeignKey(db_index=False, on_delete=django.db.models.deletion.CASCADE, related_name='results', to='ingest.testcase'),
        ),
        migrations.AlterField(
            model_name='testweek',
            name='project',
            field=models.ForeignKey(db_constraint=False, db_index=False, on_delete=django.db.models.deletion.CASCADE, related_name='+', to='ingest.project'),
        ),
        migrations.AlterField(
            model_name='testweek',
            name='test_case',
            field=models.ForeignKey(db_constraint=False, db_index=False, on_delete=django.db.models.deletion.CASCADE, related_name='weeks', to='ingest.testcase'),
        ),
        # Undoing this migration puts the foreign-key constraints back: drop rollup rows without a test first.
        migrations.RunSQL(
            migrations.RunSQL.noop,
            reverse_sql="DELETE FROM ingest_testweek WHERE test_case_id NOT IN (SELECT id FROM ingest_testcase)"
                        " OR project_id NOT IN (SELECT id FROM ingest_project)",
        ),
        migrations.RunPython(signature_like_index_drop, signature_like_index_create),
    ]

"""Fewer indexes on the results side: the single-column foreign-key indexes that composite indexes cover, the
LIKE index on signatures, and the rollup's foreign-key constraints (derived rows: see TestWeek)."""

import django.db.models.deletion
from django.db import migrations, models


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
            name='signature',
            field=models.CharField(blank=True, help_text='Failure-cause signature key (failures only).', max_length=32),
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
        migrations.AddIndex(
            model_name='testresult',
            index=models.Index(fields=['signature'], name='ingest_testresult_signature'),
        ),
    ]

"""Precomputed run-time growth per project and week (the overview reads one row)."""

import django.db.models.deletion
from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ('analytics', '0001_initial'),
        ('ingest', '0003_fewer_indexes'),
    ]

    operations = [
        migrations.CreateModel(
            name='RuntimeGrowth',
            fields=[
                ('id', models.BigAutoField(auto_created=True, primary_key=True, serialize=False, verbose_name='ID')),
                ('week', models.DateField()),
                ('window_weeks', models.IntegerField()),
                ('top', models.JSONField(default=dict)),
                ('computed_at', models.DateTimeField()),
                ('project', models.ForeignKey(on_delete=django.db.models.deletion.CASCADE, related_name='+', to='ingest.project')),
            ],
            options={
                'constraints': [models.UniqueConstraint(fields=('project', 'week'), name='uniq_runtime_growth_week')],
            },
        ),
    ]

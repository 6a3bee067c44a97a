"""A partial index on the weekly rollup's failing rows (the overview's newly failing, fixed and failed figures)."""

from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ('ingest', '0003_fewer_indexes'),
    ]

    operations = [
        migrations.AddIndex(
            model_name='testweek',
            index=models.Index(condition=models.Q(('failed__gt', 0), ('errors__gt', 0), _connector='OR'), fields=['project', 'week'], name='ingest_testweek_failing'),
        ),
    ]

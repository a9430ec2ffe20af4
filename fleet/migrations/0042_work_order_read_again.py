"""A work order kind for a capacitor to read again before replacing it (its trend's early crossing has
passed, no reading shows it past its limit). Choices only: no change to the table."""

from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ('fleet', '0041_rounds_every_position_read'),
    ]

    operations = [
        migrations.AlterField(
            model_name='workorder',
            name='kind',
            field=models.CharField(choices=[('replace_start', 'Replace start capacitor'), ('replace_run', 'Replace run capacitor'), ('inspect', 'Inspect'), ('read_again', 'Read again; replace if past its limit')], max_length=20),
        ),
    ]

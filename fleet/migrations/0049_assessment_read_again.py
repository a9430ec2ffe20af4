from django.db import migrations, models
from django.db.models.functions import TruncDate


def mark_read_again(apps, schema_editor):
    """Current assessments judged before the word was stored: the rule they were planned by (the early
    crossing passed, not "replace now"); the next refit stores the rule that counts readings since."""
    Assessment = apps.get_model("fleet", "Assessment")
    Assessment.objects.filter(is_current=True, p10_on__lte=TruncDate("created_at")).exclude(risk="replace now").update(
        read_again=True
    )


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0048_part_prior_stress_rate"),
    ]

    operations = [
        migrations.AddField(
            model_name="assessment",
            name="read_again",
            field=models.BooleanField(
                blank=True,
                help_text="The plan says read it again before replacing (planning.read_again); empty: judged before "
                "this was stored",
                null=True,
            ),
        ),
        migrations.RunPython(mark_read_again, migrations.RunPython.noop),
    ]

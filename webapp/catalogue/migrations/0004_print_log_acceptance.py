"""Print logs carry who accepted them; logs already made by lab managers count as accepted by them."""

import django.db.models.deletion
from django.conf import settings
from django.db import migrations, models

LAB_MANAGER_GROUP = "lab managers"  # as webapp.accounts.roles has it; a migration keeps its own copy


def accept_lab_managers_logs(apps, schema_editor):
    PrintLog = apps.get_model("catalogue", "PrintLog")
    managers = (models.Q(logged_by__is_superuser=True) | models.Q(logged_by__groups__name=LAB_MANAGER_GROUP))
    for log in PrintLog.objects.filter(managers).distinct():
        log.accepted_at, log.accepted_by_id = log.created_at, log.logged_by_id
        log.save(update_fields=["accepted_at", "accepted_by"])


class Migration(migrations.Migration):

    dependencies = [
        ("catalogue", "0003_record_current_versions"),
        ("auth", "0012_alter_user_first_name_max_length"),
        migrations.swappable_dependency(settings.AUTH_USER_MODEL),
    ]

    operations = [
        migrations.AddField(
            model_name="printlog",
            name="accepted_at",
            field=models.DateTimeField(blank=True, null=True),
        ),
        migrations.AddField(
            model_name="printlog",
            name="accepted_by",
            field=models.ForeignKey(blank=True, null=True, on_delete=django.db.models.deletion.SET_NULL,
                                    related_name="+", to=settings.AUTH_USER_MODEL),
        ),
        migrations.RunPython(accept_lab_managers_logs, migrations.RunPython.noop),
    ]

"""Design revisions: a family shared by every revision, a revision number, the kind and a note."""

import uuid

from django.db import migrations, models


def number_revisions(apps, schema_editor):
    """Give each existing design a family and number; a revision joins its parent's family."""
    Design = apps.get_model("checks", "Design")
    for design in Design.objects.order_by("created_at", "pk"):
        parent = design.revision_of
        if parent is not None:
            parent.refresh_from_db(fields=["family", "revision"])
        design.family = parent.family if parent is not None and parent.family else uuid.uuid4()
        design.revision = parent.revision + 1 if parent is not None and parent.revision else 1
        design.kind = (design.parameters or {}).get("kind", "") if isinstance(design.parameters, dict) else ""
        design.save(update_fields=["family", "revision", "kind"])


class Migration(migrations.Migration):

    dependencies = [("checks", "0001_initial")]

    operations = [
        migrations.AddField(model_name="design", name="family", field=models.UUIDField(null=True, editable=False)),
        migrations.AddField(model_name="design", name="revision", field=models.PositiveIntegerField(default=1)),
        migrations.AddField(model_name="design", name="kind", field=models.CharField(
            blank=True, max_length=20, help_text="component kind of a parametric design; blank: a mesh")),
        migrations.AddField(model_name="design", name="note", field=models.CharField(
            blank=True, max_length=300, help_text="what changed in this revision, in the designer's words")),
        migrations.RunPython(number_revisions, migrations.RunPython.noop),
        migrations.AlterField(model_name="design", name="family",
                              field=models.UUIDField(db_index=True, default=uuid.uuid4, editable=False)),
    ]

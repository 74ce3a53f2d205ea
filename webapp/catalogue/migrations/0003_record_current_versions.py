"""Record every existing profile's and material's current data as its first version record."""

from django.db import migrations


def record(apps, schema_editor):
    for entry_name, version_name in (("Printer", "PrinterVersion"), ("Material", "MaterialVersion")):
        Entry, Version = apps.get_model("catalogue", entry_name), apps.get_model("catalogue", version_name)
        for entry in Entry.objects.all():
            Version.objects.get_or_create(entry=entry, version=entry.version, defaults={
                "data": {**entry.data, "name": entry.name, "version": entry.version},
                "note": "as found before versioning"})


class Migration(migrations.Migration):

    dependencies = [("catalogue", "0002_versions_and_print_logs")]

    operations = [migrations.RunPython(record, migrations.RunPython.noop)]

"""Write side of the catalogue: seeding from the starter data files."""

from django.db import transaction

from services import catalogue as starter
from webapp.catalogue.models import Material, Printer


@transaction.atomic
def catalogue_seed() -> tuple[int, int]:
    """Create the starter printers and materials that are missing; return how many were added."""
    added = [0, 0]
    for i, (model, items) in enumerate(((Printer, starter.printers()), (Material, starter.materials()))):
        for item in items:
            data = item.to_dict()
            _, created = model.objects.get_or_create(slug=item.slug, defaults={"name": item.name, "data": data})
            added[i] += created
    return added[0], added[1]

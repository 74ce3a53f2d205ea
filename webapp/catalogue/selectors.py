"""Read side of the catalogue."""

from webapp.catalogue.models import Material, Printer


def printer_list_active():
    return Printer.objects.filter(retired=False)


def material_list_active():
    return Material.objects.filter(retired=False)

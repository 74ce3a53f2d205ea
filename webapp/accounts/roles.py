"""Who may do what: a lab manager keeps printer profiles, materials and prices."""

LAB_MANAGER_GROUP = "lab managers"


def is_lab_manager(user) -> bool:
    """Return True when the user may edit printers, materials and prices."""
    return bool(user.is_authenticated and (user.is_superuser or user.groups.filter(name=LAB_MANAGER_GROUP).exists()))

from webapp.accounts.roles import is_lab_manager


def roles(request):
    return {"is_lab_manager": is_lab_manager(getattr(request, "user", None)) if hasattr(request, "user") else False}

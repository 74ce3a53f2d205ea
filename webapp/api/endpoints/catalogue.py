"""Printer profiles and materials (read by everyone signed in, written by lab managers), and component kinds."""

from django.core.exceptions import PermissionDenied
from ninja import Router, Status

from services.components import KINDS, component_parameters
from webapp.accounts.roles import is_lab_manager
from webapp.api.endpoints.common import errors
from webapp.api.schemas import CatalogueIn, CatalogueOut, CatalogueUpdateIn, ComponentOut, MeOut, RetireIn
from webapp.catalogue import selectors, services
from webapp.checks.services import ApplicationError

router = Router(tags=["catalogue"])
ONLY_MANAGERS = "Only a lab manager can change printers, materials and prices."

# kind -> (every entry, entries in use, create, update, retire), each through the catalogue's own services.
KINDS_OF_ENTRY = {
    "printer": (selectors.printer_list, selectors.printer_list_active, services.printer_create,
                lambda entry, **kw: services.printer_update(printer=entry, **kw),
                lambda entry, **kw: services.printer_retire(printer=entry, **kw)),
    "material": (selectors.material_list, selectors.material_list_active, services.material_create,
                 lambda entry, **kw: services.material_update(material=entry, **kw),
                 lambda entry, **kw: services.material_retire(material=entry, **kw)),
}


@router.get("/me", response={200: MeOut, **errors()}, url_name="me")
def me(request):
    """Return who the token belongs to (a cheap way for a script to test its token)."""
    return {"username": request.auth.get_username(), "lab_manager": is_lab_manager(request.auth)}


def _entries(user, kind: str):
    """Return what the user may see: everything for a lab manager, the entries in use for anyone else."""
    every, in_use = KINDS_OF_ENTRY[kind][:2]
    return every() if is_lab_manager(user) else in_use()


def _one(user, kind: str, slug: str):
    entry = _entries(user, kind).filter(slug=slug).first()
    if entry is None:
        raise ApplicationError("not_found", f"There is no {kind} {slug!r} in use; list them at /{kind}s.", 404)
    return entry


def _manager(user) -> None:
    if not is_lab_manager(user):
        raise PermissionDenied(ONLY_MANAGERS)


def _add_routes(kind: str) -> None:
    """Add list, get, create, update and retire for printers or materials."""
    _, _, create, update, retire = KINDS_OF_ENTRY[kind]

    @router.get(f"/{kind}s", response={200: list[CatalogueOut], **errors()}, url_name=f"{kind}_list",
                operation_id=f"{kind}_list", summary=f"List the {kind}s")
    def entry_list(request):
        """List the entries in use (a lab manager sees the retired ones too)."""
        return _entries(request.auth, kind)

    @router.get(f"/{kind}s/{{slug}}", response={200: CatalogueOut, **errors(404)}, url_name=f"{kind}_get",
                operation_id=f"{kind}_get", summary=f"Get one {kind}")
    def entry_get(request, slug: str):
        """Return one entry with every value and its source."""
        return _one(request.auth, kind, slug)

    @router.post(f"/{kind}s", response={201: CatalogueOut, **errors(400, 403, 422)}, url_name=f"{kind}_create",
                 operation_id=f"{kind}_create", summary=f"Add a {kind} (lab managers)")
    def entry_create(request, body: CatalogueIn):
        """Add an entry at version 1; data that would make checks wrong is refused, each problem named."""
        _manager(request.auth)
        return Status(201, create(user=request.auth, slug=body.slug, name=body.name, data=body.data, note=body.note))

    @router.put(f"/{kind}s/{{slug}}", response={200: CatalogueOut, **errors(400, 403, 404, 422)},
                url_name=f"{kind}_update", operation_id=f"{kind}_update", summary=f"Edit a {kind} (lab managers)")
    def entry_update(request, slug: str, body: CatalogueUpdateIn):
        """Save new data as the next version; earlier versions and the reports that used them keep theirs."""
        _manager(request.auth)
        data = {**body.data, **({"name": body.name} if body.name else {})}
        return update(_one(request.auth, kind, slug), user=request.auth, data=data, note=body.note,
                      base_version=body.base_version)

    @router.post(f"/{kind}s/{{slug}}/retire", response={200: CatalogueOut, **errors(400, 403, 404, 422)},
                 url_name=f"{kind}_retire", operation_id=f"{kind}_retire", summary=f"Retire a {kind} (lab managers)")
    def entry_retire(request, slug: str, body: RetireIn):
        """Retire an entry (new checks cannot choose it) or bring it back."""
        _manager(request.auth)
        return retire(_one(request.auth, kind, slug), user=request.auth, retired=body.retired)


_add_routes("printer")
_add_routes("material")


@router.get("/components", response={200: list[ComponentOut], **errors()}, url_name="component_list")
def component_list(request):
    """List the parametric component kinds and the parameters each takes."""
    return [{"kind": kind, "parameters": [s.to_dict() for s in component_parameters(kind)]} for kind in KINDS]

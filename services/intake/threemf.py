"""3MF with its ZIP gate: members, sizes and ratios checked before anything is expanded, then the model."""

from __future__ import annotations

import io
import re
import zipfile
import zlib

import numpy as np
from lxml import etree

from services.intake.common import IntakeLimits, _refuse, _shown
from services.intake.threemf_model import MALFORMED_XML, XML_OPTIONS, ComponentLimits, read_model
from services.intake.units import _3MF_UNITS
from services.part import Part
from services.sizes import over_limit_text


_ZIP_MAGIC = (b"PK\x03\x04", b"PK\x05\x06")


_ARCHIVE_SUFFIXES = (".zip", ".3mf", ".gz", ".tgz", ".bz2", ".xz", ".7z", ".rar", ".tar", ".zst", ".jar")


_ARCHIVE_MAGIC = (b"PK\x03\x04", b"PK\x05\x06", b"\x1f\x8b", b"7z\xbc\xaf", b"Rar!", b"BZh", b"\xfd7zXZ",
                  b"\x28\xb5\x2f\xfd")


_MODEL = "3d/3dmodel.model"


_CONTENT_TYPES = "[content_types].xml"


def _read_3mf_model(data: bytes, *, name: str, limits: IntakeLimits) -> tuple[np.ndarray, np.ndarray]:
    """Return the expanded mesh of a vetted 3MF package's build, components capped before expansion."""
    caps = ComponentLimits(max_components=limits.max_3mf_components, max_depth=limits.max_3mf_depth,
                           max_instances=limits.max_3mf_instances, max_triangles=limits.max_triangles)
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        info = _model_member(zf.infolist(), name=name)
        with zf.open(info) as fh:
            return read_model(fh, name=name, limits=caps)


def _check_3mf(data: bytes, *, name: str, limits: IntakeLimits) -> str:
    """Vet a 3MF package before any parser inflates it, and return its model's unit attribute."""
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as zf:
            model = _checked_members(zf, name=name, limits=limits)
            _refuse_doctype(zf, model, name=name)
            return _model_unit(zf, model, name=name)
    except (zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, OSError, zlib.error, RuntimeError,
            NotImplementedError, ValueError) as exc:
        raise _refuse("zip_corrupt", name, "the 3MF archive is damaged (its contents do not match its index); "
                      "export the part again.") from exc


def _checked_members(zf: zipfile.ZipFile, *, name: str, limits: IntakeLimits) -> zipfile.ZipInfo:
    """Apply the member count, name, size and ratio caps from the ZIP index; return the model member."""
    infos = zf.infolist()
    if len(infos) > limits.zip_max_members:
        raise _refuse("zip_too_many_members", name, f"the 3MF archive holds {len(infos):,} files, more than the "
                      f"{limits.zip_max_members:,} allowed; export the part alone, without extra attachments.")
    for info in infos:
        _check_member(info, name=name, limits=limits)
    total = sum(info.file_size for info in infos)
    if total > limits.zip_max_total_bytes:
        raise _refuse("zip_bomb", name, f"the 3MF archive would inflate too far: "
                      f"{over_limit_text(total, limits.zip_max_total_bytes)}; export a smaller mesh.")
    _refuse_case_twins(infos, name=name)
    model = _model_member(infos, name=name)
    for info in infos:
        _refuse_nested(zf, info, name=name)
    return model


def _check_member(info: zipfile.ZipInfo, *, name: str, limits: IntakeLimits) -> None:
    """Refuse one ZIP member with an unsafe name, an archive inside, or a bomb's declared size."""
    member = info.filename.replace("\\", "/")
    if member.startswith("/") or ".." in member.split("/") or re.match(r"[A-Za-z]:", member):
        raise _refuse("zip_unsafe_name", name, f"the 3MF archive holds a file named '{_shown(info.filename)}' "
                      "that points outside the package; export the part again from your CAD program.")
    if member.lower().endswith(_ARCHIVE_SUFFIXES):
        raise _refuse("zip_nested", name, f"the 3MF archive holds another archive ('{_shown(info.filename)}'); "
                      "upload the 3MF file itself, not a packed collection.")
    ratio = info.file_size / max(info.compress_size, 1)
    if info.file_size > limits.zip_max_member_bytes or ratio > limits.zip_max_ratio:
        raise _refuse("zip_bomb", name, f"the 3MF member '{_shown(info.filename)}' would inflate from "
                      f"{info.compress_size:,} to {info.file_size:,} bytes ({ratio:,.0f} to 1), which looks like "
                      "a ZIP bomb; export the part again from your CAD program.")


def _refuse_case_twins(infos: list[zipfile.ZipInfo], *, name: str) -> None:
    """Refuse two members whose names differ only in case (which one a reader takes is undefined)."""
    # Package part names compare case-insensitively (Open Packaging Conventions, ECMA-376 Part 2; from memory).
    seen: dict[str, str] = {}
    for info in infos:
        key = info.filename.replace("\\", "/").lower()
        if key in seen:
            raise _refuse("3mf_ambiguous_parts", name, f"the 3MF archive holds both '{_shown(seen[key])}' and "
                          f"'{_shown(info.filename)}', names that differ only in case, so which part is meant is "
                          "ambiguous; export the part again.")
        seen[key] = info.filename


def _model_member(infos: list[zipfile.ZipInfo], *, name: str) -> zipfile.ZipInfo:
    """Return the single 3D/3dmodel.model member, refusing a package without one or with decoys."""
    lowered = {info.filename.lower(): info for info in infos}
    decoys = [n for n in lowered if _MODEL in n and n != _MODEL]
    if _MODEL not in lowered or _CONTENT_TYPES not in lowered or decoys:
        raise _refuse("3mf_missing_model", name, "the archive lacks the 3MF parts '3D/3dmodel.model' and "
                      "'[Content_Types].xml' (or holds look-alikes), so it is not a 3MF file; export it again.")
    return lowered[_MODEL]


def _refuse_nested(zf: zipfile.ZipFile, info: zipfile.ZipInfo, *, name: str) -> None:
    """Refuse a member whose first bytes are another archive's signature."""
    if info.is_dir():
        return
    with zf.open(info) as fh:
        head = fh.read(8)
    if head.startswith(_ARCHIVE_MAGIC):
        raise _refuse("zip_nested", name, f"the 3MF archive holds another archive ('{_shown(info.filename)}'); "
                      "upload the 3MF file itself, not a packed collection.")


def _refuse_doctype(zf: zipfile.ZipFile, info: zipfile.ZipInfo, *, name: str) -> None:
    """Refuse a model that declares a DTD or entities (3MF core spec: consumers treat DTDs as errors)."""
    tail = b""
    with zf.open(info) as fh:
        while chunk := fh.read(1 << 20):
            window = tail + chunk.lower()
            if b"<!doctype" in window or b"<!entity" in window:
                raise _refuse("xml_doctype", name, "the 3MF model declares a DTD or XML entities, which 3MF "
                              "forbids and we refuse; export the part again from your CAD program.")
            tail = window[-16:]


def _model_unit(zf: zipfile.ZipFile, info: zipfile.ZipInfo, *, name: str) -> str:
    """Return the model element's unit attribute (millimeter when absent, as the spec says)."""
    try:
        with zf.open(info) as fh:
            _, root = next(etree.iterparse(fh, events=("start",), **XML_OPTIONS))
    except (etree.XMLSyntaxError, StopIteration) as exc:
        raise _refuse("xml_malformed", name, MALFORMED_XML) from exc
    if etree.QName(root).localname != "model":
        raise _refuse("xml_malformed", name, "the 3MF model part does not start with a <model> element; export "
                      "the part again.")
    unit = root.get("unit", "millimeter")
    if unit not in _3MF_UNITS:
        raise _refuse("unknown_unit", name, f"the 3MF model's unit {unit!r} is not one the 3MF standard "
                      "defines; export the part again with millimetres.")
    return unit

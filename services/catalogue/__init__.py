"""The starter catalogue: printer profiles and materials shipped as data files, with sources.

The lab manager copies these into the database and edits them there; the files stay the
reference a fresh install starts from.
"""

from __future__ import annotations

import copy
import json
from functools import lru_cache
from pathlib import Path

from services.errors import UnusableInput
from services.profiles import Material, PrinterProfile

_HERE = Path(__file__).resolve().parent


def printers() -> list[PrinterProfile]:
    """Return every starter printer profile, in file order."""
    return list(_printers())


def materials() -> list[Material]:
    """Return every starter material, in file order."""
    return list(_materials())


def printer(slug: str) -> PrinterProfile:
    """Return the starter printer profile with this slug."""
    return _find(_printers(), slug, "printer profile")


def material(slug: str) -> Material:
    """Return the starter material with this slug."""
    return _find(_materials(), slug, "material")


def _printers() -> tuple[PrinterProfile, ...]:
    return tuple(PrinterProfile.from_dict(d) for d in _load("printers.json")["printers"])


def _materials() -> tuple[Material, ...]:
    return tuple(Material.from_dict(d) for d in _load("materials.json")["materials"])


def _load(name: str) -> dict:
    # Fresh copies each call: a profile's dicts are mutable, and one caller's edit must not leak.
    return copy.deepcopy(_read(name))


@lru_cache(maxsize=None)
def _read(name: str) -> dict:
    with open(_HERE / name, encoding="utf-8") as f:
        return json.load(f)


def _find(items, slug: str, what: str):
    for item in items:
        if item.slug == slug:
            return item
    known = ", ".join(i.slug for i in items)
    raise UnusableInput(f"unknown_{what.split()[0]}", f"There is no {what} {slug!r} in the catalogue; known: {known}.")

"""Parametric quasi-optical parts built with manifold3d from lens parameters.

    component_parameters(kind) -> list[ParamSpec]      what a kind takes (drives CLI flags and forms)
    build_component(kind, params, material=, printer=) -> Component
    export_mesh(part, "stl" | "3mf") -> bytes

Every part is a closed solid checked by manifold3d and by intake's mesh examination, with the
flat back on z = 0 and the optical axis along z; ``Part.parameters`` carries every input and
derived value.
"""

from __future__ import annotations

from services.components import graded, lens, multilevel, spiral, window
from services.components.base import CellLayout, Component, Context
from services.components.export import export_mesh
from services.components.specs import KINDS, ParamSpec, component_parameters, resolve_parameters
from services.profiles import Material, PrinterProfile

__all__ = ["KINDS", "CellLayout", "Component", "ParamSpec", "build_component", "component_parameters", "export_mesh"]


def build_component(kind: str, params: dict, *, material: Material, printer: PrinterProfile | None = None) -> Component:
    """Build one part of the kind from its parameters, or raise UnusableInput saying what to change."""
    resolved = resolve_parameters(kind, dict(params or {}))
    return _BUILDERS[kind](Context(kind, resolved, material, printer))


_BUILDERS = {
    "plano-convex": lens.build_plano_convex,
    "zoned": lens.build_zoned,
    "multilevel": multilevel.build_multilevel,
    "graded-index": graded.build_graded_index,
    "spiral": spiral.build_spiral,
    "window": window.build_window,
}

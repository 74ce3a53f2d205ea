"""Rule ``min_gap``: void between material narrower than the printer's minimum gap (it fuses shut).

In a layer (``xy_mm``) the void is measured the way ``min_feature`` measures material: an exact disk
opening of the void at the limit finds candidates, the width across each candidate pixel (from its
nearest material to the material on the other side, along that edge's normal: ``services.rules.thin``)
keeps necks and slots and drops the corners of wide void at any angle, and an instance counts when it stays narrow over more than the limit's height, so the
root of a sloped groove is not a gap. Enclosed holes that ``min_hole`` judges by their diameter are
left to it. Along the build axis (``z_mm``), a void with material both under and over it in the
same pixel column is a horizontal gap of that height; a roofed void whose footprint is about as
wide as it is tall is a horizontal hole instead and left to ``min_hole``.

Error model: as ``min_feature`` (the limit in whole pixels rounded down, widths within one pixel;
a gap drawn exactly at the limit passes); heights along z are whole layers, within one layer of the
drawn gap.
"""

from __future__ import annotations

import math

import numpy as np

from services.findings import Finding, rule_label
from services.rules import raster, thin
from services.rules.common import (Groups, RuleCollector, bounded_instances, family_check, fmt_mm, fmt_xyz,
                                   group_instances, limit_mm, output, picture)
from services.rules.min_feature import _next_to, add_pixel_groups, link_pixels
from services.rules.scan import RunView

RULE = "min_gap"
HOLE_SHAPE = 1.5  # a roofed void no wider than 1.5x its height is a horizontal hole, not a gap


check = family_check(RULE, lambda: Collector)


class Collector(RuleCollector):
    """Collect narrow void run by run; ``finish`` adds the horizontal gaps found along z."""

    rule = RULE

    def start(self, limits: dict, *, stack, printer) -> bool:
        (self.xy_mm, self.z_mm), self.severity, ok = self.read_limits(
            limits, printer, "minimum gap and severity",
            {"xy_mm": "gap in the layer plane (xy_mm)", "z_mm": "gap along the build axis (z_mm)"})
        if not ok:
            return False
        self.n_xy = raster.limit_px(self.xy_mm, stack.pixel_mm) if self.xy_mm else None
        self.reach_px = 2 * self.n_xy + 4 if self.n_xy else 0
        self.hole_px2 = _hole_area_px(printer, stack.pixel_mm)
        self.needs = ("bounded",) if self.z_mm else ()
        self.groups = Groups("min")
        self._prev: tuple[np.ndarray, np.ndarray] | None = None
        return True

    def visit(self, view: RunView) -> None:
        if self.n_xy is None:
            return
        rows, cols, width, depth = narrow_void(view, self.n_xy, self.hole_px2)
        if rows.size == 0:
            self._prev = None
            return
        flat = rows * view.mask.shape[1] + cols
        ids = add_pixel_groups(self.groups, view, rows, cols, width, depth)
        if self._prev is not None:
            link_pixels(self.groups, self._prev, (flat, ids))
        self._prev = (flat, ids)

    def finish(self, frame):
        findings, figures = list(self.notes), {}
        for found in (self._xy_finding(frame) if self.active and self.xy_mm else None,
                      self._z_finding(frame) if self.active and self.z_mm else None):
            if found:
                findings.append(found[0])
                figures.update(found[1])
        return output(findings, figures)

    def _xy_finding(self, frame):
        inst = self.groups.instances()
        tall = (inst["last"] - inst["first"] + 1) * frame.dz > self.xy_mm + 1e-9
        if not tall.any():
            return None
        i = np.flatnonzero(tall)[np.argmin(inst["value"][tall])]
        k, flat, count = int(inst["layer"][i]), int(inst["at"][i]), int(tall.sum())
        width_mm = float(inst["value"][i]) * frame.px
        where = frame.location(flat, k)
        message = (f"{count} gap{'s' if count > 1 else ''} narrower than {fmt_mm(self.xy_mm)} mm will fuse shut "
                   f"(the narrowest {width_mm:.3f} mm at {fmt_xyz(where)}); widen to at least {self.xy_mm:.2f} mm.")
        rows, cols, _, _ = narrow_void(RunView(frame, -1, k, k, frame.layer(k), None, None), self.n_xy, self.hole_px2)
        highlight = np.zeros((frame.ny, frame.nx), bool)
        highlight[rows, cols] = True
        listed = group_instances(frame, inst, tall)
        return self._finding(frame, "xy", message, width_mm, self.xy_mm, flat, k, highlight, count,
                             (int(inst["first"][i]), int(inst["last"][i])), listed)

    def _z_finding(self, frame):
        found = frame.bounded.instances()
        gaps = (found["width_px"] * frame.px > HOLE_SHAPE * found["height_mm"]) & (found["height_mm"] < self.z_mm - 1e-9)
        if not gaps.any():
            return None
        i = np.flatnonzero(gaps)[np.argmin(found["height_mm"][gaps])]
        height, base, flat = float(found["height_mm"][i]), float(found["base_mm"][i]), int(found["at"][i])
        k = min(int((base + height / 2) / frame.dz), frame.stack.count - 1)
        where = frame.location(flat, k)
        count = int(gaps.sum())
        message = (f"{count} horizontal gap{'s' if count > 1 else ''} lower than {fmt_mm(self.z_mm)} mm between layers "
                   f"(the lowest {height:.3f} mm at {fmt_xyz(where)}) will close from over-cure; "
                   f"open to at least {self.z_mm:.2f} mm.")
        highlight = (found["labels"] == i + 1) & ~frame.layer(k)
        layers = (int(round(base / frame.dz)), int(round((base + height) / frame.dz)) - 1)
        listed = bounded_instances(frame, found, gaps)
        return self._finding(frame, "z", message, height, self.z_mm, flat, k, highlight, count, layers, listed)

    def _finding(self, frame, kind, message, measured, limit, flat, k, highlight, count, layers, listed=()):
        name = f"{RULE}_{kind}.png"
        png = picture(frame, layer=k, flat=flat, highlight=highlight, half_px=6 * raster.limit_px(limit, frame.px),
                      title=f"{rule_label(RULE)}: layer {k}, z = {frame.z_mm(k):.2f} mm")
        finding = Finding(RULE, self.severity, message, measured=round(measured, 4), limit=limit, unit="mm",
                          location_mm=frame.location(flat, k), layers=layers, count=count, picture=name,
                          instances=listed)
        return finding, {name: png}


def narrow_void(view: RunView, n_px: int, hole_px2: float | None):
    """Return rows, cols, width px and depth px (distance to material) of the narrow void of one run."""
    rs, cs = view.window  # reaches 2 n + 4 past the material (reach_px): narrow void lies well inside it
    void = ~view.mask[rs, cs]
    opened = raster.open_disk(void, n_px, outside=True)
    rows, cols = raster.coords(void & ~opened)
    keep = ~_next_to(opened, rows, cols)  # one pixel of staircase tolerance
    if hole_px2 is not None and rows.size and view.has_pockets:
        count, labels, outside = view.void  # labels on the window, as rows and cols are
        small = ~outside & (view.void_area < hole_px2)
        small[0] = False
        keep &= ~small[labels[rows, cols]]  # holes min_hole judges by their diameter
    rows, cols = rows[keep], cols[keep]
    if rows.size == 0:
        return rows, cols, np.zeros(0), np.zeros(0)
    width, depth = thin.widths_at(void, rows, cols, n_px)  # from the void, the nearest material
    narrow = thin.is_under(width, n_px)
    rows, cols = rows[narrow], cols[narrow]
    return rows + rs.start, cols + cs.start, width[narrow], depth[narrow]


def _hole_area_px(printer, pixel_mm: float) -> float | None:
    """Return the pixel area under which an enclosed void is a hole for ``min_hole``, if it is on."""
    hole = printer.rule("min_hole")
    along = limit_mm(hole, "along_z_mm") if hole is not None else None
    return None if along is None else math.pi / 4 * (along / pixel_mm) ** 2

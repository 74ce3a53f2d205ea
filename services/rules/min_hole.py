"""Rule ``min_hole``: holes smaller than the printer's minimum hole diameter (they may close off).

Along the build axis (``along_z_mm``): void enclosed by material in a layer, measured by its
equivalent diameter sqrt(4 A / pi) (A = pixel count x pixel area), followed from layer to layer. A hole
counts when it stays small over more than its limit's height, so the narrowing tip of a larger
cavity is not a hole. Across the build axis (``across_z_mm``): a void with material under and over it
in the same pixel column whose footprint is about as wide as it is tall (a horizontal hole or
channel), measured by its tallest column.

Error model: the equivalent diameter of a pixel-centre-sampled disk is within half a pixel of the
drawn diameter for holes of a few pixels and more; a hole counts as small when its equivalent
diameter is under the limit by more than half a pixel. Heights along z are whole layers.
"""

from __future__ import annotations

import math

import numpy as np

from services.findings import Finding, rule_label
from services.rules import raster
from services.rules.common import (Groups, RuleCollector, bounded_instances, family_check, fmt_mm, fmt_xyz,
                                   group_instances, output, picture)
from services.rules.min_gap import HOLE_SHAPE
from services.rules.scan import RunView

RULE = "min_hole"


check = family_check(RULE, lambda: Collector)


class Collector(RuleCollector):
    """Collect small enclosed holes run by run; ``finish`` adds the horizontal holes."""

    rule = RULE
    ahead = ("void",)  # what every run needs, made ahead in the scan's second thread

    def start(self, limits: dict, *, stack, printer) -> bool:
        (self.along_mm, self.across_mm), self.severity, ok = self.read_limits(
            limits, printer, "minimum hole diameter and severity",
            {"along_z_mm": "hole diameter along the build axis (along_z_mm)",
             "across_z_mm": "hole diameter across the build axis (across_z_mm)"})
        if not ok:
            return False
        self.px = stack.pixel_mm
        self.needs = ("bounded",) if self.across_mm else ()
        self.groups = Groups("min")
        self._prev: np.ndarray | None = None  # void label -> group id in the previous run, -1 if none
        return True

    def visit(self, view: RunView) -> None:
        if self.along_mm is None or not view.has_pockets:
            self._prev = None
            return
        small, diameter = small_holes(view, self.along_mm / self.px)
        if not small.any():
            self._prev = None
            return
        labels = np.flatnonzero(small)
        ids = self.groups.add(diameter[labels], _centres(view, small)[labels], view.first, view.last)
        lut = np.full(small.size, -1)
        lut[labels] = ids
        if self._prev is not None and len(view.void_links):
            a, b = self._prev[view.void_links[:, 0]], lut[view.void_links[:, 1]]
            keep = (a >= 0) & (b >= 0)
            self.groups.link(a[keep], b[keep])
        self._prev = lut

    def finish(self, frame):
        findings, figures = list(self.notes), {}
        for found in (self._along(frame) if self.active and self.along_mm else None,
                      self._across(frame) if self.active and self.across_mm else None):
            if found:
                findings.append(found[0])
                figures.update(found[1])
        return output(findings, figures)

    def _along(self, frame):
        inst = self.groups.instances()
        deep = (inst["last"] - inst["first"] + 1) * frame.dz > self.along_mm + 1e-9
        if not deep.any():
            return None
        i = np.flatnonzero(deep)[np.argmin(inst["value"][deep])]
        k, flat, count = int(inst["layer"][i]), int(inst["at"][i]), int(deep.sum())
        diameter = float(inst["value"][i]) * frame.px
        where = frame.location(flat, k)
        message = (f"{count} hole{'s' if count > 1 else ''} along the build axis smaller than {fmt_mm(self.along_mm)} mm "
                   f"may close off (the smallest {diameter:.3f} mm across at {fmt_xyz(where)}); "
                   f"enlarge to at least {self.along_mm:.2f} mm.")
        layer = frame.layer(k)
        view = RunView(frame, -1, k, k, layer, None, None)
        small, _ = small_holes(view, self.along_mm / self.px)
        highlight = small[view.void_labels_over(slice(None), slice(None))]
        listed = group_instances(frame, inst, deep)
        return self._finding(frame, "along_z", message, diameter, self.along_mm, flat, k, highlight, count,
                             (int(inst["first"][i]), int(inst["last"][i])), listed)

    def _across(self, frame):
        found = frame.bounded.instances()
        holes = (found["width_px"] * frame.px <= HOLE_SHAPE * found["height_mm"]) & (found["height_mm"] < self.across_mm - 1e-9)
        if not holes.any():
            return None
        i = np.flatnonzero(holes)[np.argmin(found["height_mm"][holes])]
        height, base, flat = float(found["height_mm"][i]), float(found["base_mm"][i]), int(found["at"][i])
        k = min(int((base + height / 2) / frame.dz), frame.stack.count - 1)
        where = frame.location(flat, k)
        count = int(holes.sum())
        message = (f"{count} hole{'s' if count > 1 else ''} across the build axis smaller than {fmt_mm(self.across_mm)} mm "
                   f"may close off (the smallest {height:.3f} mm high at {fmt_xyz(where)}); "
                   f"enlarge to at least {self.across_mm:.2f} mm.")
        highlight = (found["labels"] == i + 1) & ~frame.layer(k)
        layers = (int(round(base / frame.dz)), int(round((base + height) / frame.dz)) - 1)
        listed = bounded_instances(frame, found, holes)
        return self._finding(frame, "across_z", message, height, self.across_mm, flat, k, highlight, count, layers, listed)

    def _finding(self, frame, kind, message, measured, limit, flat, k, highlight, count, layers, listed=()):
        name = f"{RULE}_{kind}.png"
        png = picture(frame, layer=k, flat=flat, highlight=highlight, half_px=4 * raster.limit_px(limit, frame.px),
                      title=f"{rule_label(RULE)}: layer {k}, z = {frame.z_mm(k):.2f} mm")
        finding = Finding(RULE, self.severity, message, measured=round(measured, 4), limit=limit, unit="mm",
                          location_mm=frame.location(flat, k), layers=layers, count=count, picture=name,
                          instances=listed)
        return finding, {name: png}


def small_holes(view: RunView, limit_px: float) -> tuple[np.ndarray, np.ndarray]:
    """Return (lookup over void labels: enclosed and smaller than the limit, equivalent diameter px)."""
    count, labels, outside = view.void
    diameter = np.sqrt(4 * view.void_area / math.pi)
    small = ~outside & (view.void_area > 0) & (diameter < limit_px - 0.5)
    small[0] = False
    return small, diameter


def _centres(view: RunView, small: np.ndarray) -> np.ndarray:
    """Return, per void label, the flat index of the pixel at its centroid (or -1)."""
    count, labels, _ = view.void
    idx = view.enclosed_index
    lab = view.enclosed_labels
    pick = small[lab]
    idx, lab = idx[pick], lab[pick]
    rows, cols = np.divmod(idx, view.mask.shape[1])
    n = np.maximum(np.bincount(lab, minlength=count), 1)
    r = np.rint(np.bincount(lab, weights=rows, minlength=count) / n).astype(np.int64)
    c = np.rint(np.bincount(lab, weights=cols, minlength=count) / n).astype(np.int64)
    return np.where(small, r * view.mask.shape[1] + c, -1)

"""Rule ``overhang``: downward-facing surfaces shallower than the self-supporting angle, and supports.

From the layer stack's step between layers (shared/references/manufacturing.md section 2.2,
slice-based overhang): material new in layer k that lies farther than dz / tan(angle) from all
material of layer k-1 grows out too far to hold itself up. One pixel of tolerance is added to that
reach against the staircase of the pixel grid. A region of such material is measured by its reach
beyond the layer below (the largest distance of its pixels from layer k-1): its angle from the
horizontal is atan(dz / reach). A region that reaches more than four self-supporting steps in one
layer is a flat start (an island, ``services.rules.island``), not a slope.

Regions are grouped in plan view: the steps of one sloped surface sit side by side. The support
volume is counted column by column under every pixel that needs support (overhangs and islands),
down to the material below or the build plate (manufacturing.md section 2.2, column counting).

Error model: the reach is measured to within a pixel, so the angle is that of a step within one
pixel of the drawn step; surfaces within about one pixel per layer of the limit may go either way.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from services.findings import Finding, rule_label
from services.numbers_text import significant
from services.rules import raster
from services.rules.common import RuleCollector, family_check, fmt_xyz, limit_mm, output, picture, severity_of
from services.rules.scan import RunView, layer_count_dtype

RULE = "overhang"
FLAT_STEPS = 4.0  # a region reaching farther than this many self-supporting steps in one layer is a flat start


check = family_check(RULE, lambda: Collector, "Return the overhang findings and the support-volume estimate.")


def reach_px(printer, stack) -> float | None:
    """Return how far (px) a layer may reach beyond the one below on its own: dz / tan(angle)."""
    limits = printer.rules.get(RULE, {})
    angle = limit_mm(limits, "self_supporting_deg")
    if angle is None or angle >= 90:
        return None
    return stack.layer_height_mm / math.tan(math.radians(angle)) / stack.pixel_mm


def undersides(view: RunView, reach: float | None) -> dict | None:
    """Return the new material of a run that rests on nothing: islands, slopes and flat starts.

    Cached on the view, so the overhang and island rules share it. Keys: ``crop`` (r0, c0),
    ``islands`` (labels of new components touching nothing old), ``regions`` (labels of other
    unsupported material), ``reach`` (px per region), ``count_islands``, ``count_regions``.
    """
    key = ("undersides", reach)
    if key in view.__dict__:
        return view.__dict__[key]
    view.__dict__[key] = found = _undersides(view, reach)
    return found


def _undersides(view: RunView, reach: float | None) -> dict | None:
    if view.prev is None or not view.new.any():
        return None
    margin = int(math.ceil(FLAT_STEPS * (reach or 1))) + 3
    r0, r1, c0, c1 = raster.bbox(view.new)
    r0, c0 = max(r0 - margin, 0), max(c0 - margin, 0)
    r1, c1 = min(r1 + margin, view.mask.shape[0]), min(c1 + margin, view.mask.shape[1])
    new, below = view.new[r0:r1, c0:c1], view.prev.mask[r0:r1, c0:c1]
    old = view.mask[r0:r1, c0:c1] & below
    n_new, new_labels = raster.label(new, 8)
    touched = np.zeros(n_new, bool)
    touched[new_labels[cv2.dilate(old.view(np.uint8), np.ones((3, 3), np.uint8)).view(bool) & new]] = True
    island = ~touched
    island[0] = False
    islands = np.where(island[new_labels], new_labels, 0)
    out = {"crop": (r0, c0), "islands": islands, "count_islands": n_new, "regions": None, "count_regions": 0,
           "new": new_labels}
    if reach is not None:
        held = raster.dilate_disk(below, max(1, int(2 * (reach + 1))))
        loose = new & ~held & (islands == 0)
        n_loose, regions = raster.label(loose, 8)
        dist = cv2.distanceTransform((~below).view(np.uint8), cv2.DIST_L2, 5)
        far, at = raster.per_label_max(dist, regions, n_loose, loose)
        out.update(regions=regions, count_regions=n_loose, reach=far, at=at)
    return out


def _starts(found: dict, reach: float) -> np.ndarray:
    """Return the new material that starts in mid-air: every new component holding an island or a flat start."""
    new, regions = found["new"], found["regions"]
    flat = found["reach"] > FLAT_STEPS * reach
    flat[0] = False
    needs = np.zeros(int(new.max()) + 1, bool)
    needs[new[(found["islands"] > 0) | flat[regions]]] = True
    needs[0] = False
    return needs[new]


def _slopes(found: dict, reach: float, frame) -> tuple[np.ndarray, np.ndarray]:
    """Return the new material on a too-shallow slope (whole steps, so steps tile the plan view) and its angle.

    A step (component of new material) counts when it holds a region that reaches too far but no
    flat start or island (those are the island rule's); its angle is its shallowest region's.
    """
    new, regions = found["new"], found["regions"]
    angle = np.degrees(np.arctan2(frame.dz, found["reach"] * frame.px))
    flat = found["reach"] > FLAT_STEPS * reach
    flat[0] = False
    loose = (regions > 0) & ~flat[regions]
    count = int(new.max()) + 1
    step_angle = np.full(count, np.inf)
    np.minimum.at(step_angle, new[loose].astype(np.intp), angle[regions[loose]].astype(np.float64))
    start = np.zeros(count, bool)
    start[new[(found["islands"] > 0) | flat[regions]]] = True
    step_angle[start] = np.inf
    step_angle[0] = np.inf
    per_pixel = step_angle[new].astype(np.float32)
    return np.isfinite(per_pixel), per_pixel


class Collector(RuleCollector):
    """Collect overhanging pixels in plan view and count support columns under everything loose."""

    rule = RULE
    needs = ("below",)

    def start(self, limits: dict, *, stack, printer) -> bool:
        self.angle = limit_mm(limits, "self_supporting_deg")
        self.severity = severity_of(limits)
        self.reach = reach_px(printer, stack)
        if self.missing(printer, "self-supporting angle and severity", self.severity is None or self.reach is None):
            return False
        self.support_mm3 = 0.0
        self.columns: np.ndarray | None = None  # plan view: empty layers under sloped new material
        self.map: np.ndarray | None = None  # plan view: angle (deg) of the shallowest overhang per pixel
        self.layer_map: np.ndarray | None = None
        return True

    def visit(self, view: RunView) -> None:
        found = undersides(view, self.reach)
        if found is None:
            return
        r0, c0 = found["crop"]
        starts = _starts(found, self.reach)
        self._support(view, starts, r0, c0)
        self._keep_columns(view, (found["new"] > 0) & ~starts, r0, c0)
        surface, angle = _slopes(found, self.reach, view.frame)
        if surface.any():
            self._record(view, surface, angle, r0, c0)

    def _support(self, view: RunView, needs: np.ndarray, r0: int, c0: int) -> None:
        """Add the empty layers under each pixel needing support, down to material or the plate."""
        top = view.below.top[r0:r0 + needs.shape[0], c0:c0 + needs.shape[1]][needs]  # layers; 0: the plate
        self.support_mm3 += float(np.sum(view.first - top.astype(np.int64))) * view.frame.dz * view.frame.px ** 2

    def _keep_columns(self, view: RunView, new: np.ndarray, r0: int, c0: int) -> None:
        """Add, per plan pixel, the empty column under new material on a slope (counted in ``finish``).

        A shallow surface is judged step by step with a pixel of tolerance, so some of its steps pass
        alone; the support goes under the whole surface, so the columns are kept for every step and
        summed over the surface's plan once it is known.
        """
        if self.columns is None:  # whole layers: a column's empty spans add up to at most the stack's height
            self.columns = np.zeros(view.mask.shape, layer_count_dtype(view.frame))
        box = self.columns[r0:r0 + new.shape[0], c0:c0 + new.shape[1]]
        top = view.below.top[r0:r0 + new.shape[0], c0:c0 + new.shape[1]][new]
        box[new] += (view.first - top).astype(box.dtype)

    def _record(self, view: RunView, surface: np.ndarray, angle: np.ndarray, r0: int, c0: int) -> None:
        if self.map is None:
            self.map = np.full(view.mask.shape, np.inf, np.float32)
            self.layer_map = np.zeros(view.mask.shape, layer_count_dtype(view.frame))
        rows, cols = raster.coords(surface)
        a = angle[rows, cols]
        rows, cols = rows + r0, cols + c0
        better = a < self.map[rows, cols]
        self.map[rows[better], cols[better]] = a[better]
        self.layer_map[rows[better], cols[better]] = view.first

    def finish(self, frame):
        if not self.active:
            return output(list(self.notes))
        summary = {"support_volume_mm3": round(self.support_mm3, 3), "self_supporting_deg": self.angle,
                   "overhang_area_mm2": 0.0}
        if self.map is None:
            return output(list(self.notes), summary=summary)
        where_any = np.isfinite(self.map)
        # Steps of one surface that stood steep enough in some layers leave gaps of about one reach
        # in plan: bridge them before counting surfaces and their supports.
        bridged = raster.dilate_disk(where_any, 2 * int(math.ceil(self.reach + 1)) + 1)
        count, labels = raster.label(bridged, 8)
        self.support_mm3 += float(self.columns[bridged].sum(dtype=np.float64)) * frame.dz * frame.px ** 2
        summary["support_volume_mm3"] = round(self.support_mm3, 3)
        area_mm2 = float(where_any.sum()) * frame.px ** 2
        summary["overhang_area_mm2"] = round(area_mm2, 3)
        flat = int(np.argmin(self.map))
        k = int(self.layer_map.ravel()[flat])
        angle = float(self.map.ravel()[flat])
        where = frame.location(flat, k)
        n = count - 1
        message = (f"{n} downward-facing surface{'s' if n > 1 else ''} shallower than {self.angle:g} deg "
                   f"({significant(area_mm2)} mm2 in plan; the shallowest {angle:.0f} deg at {fmt_xyz(where)}) "
                   f"need supports; add supports there or turn the part so they face up or stand steeper.")
        view = RunView(frame, -1, k, k, frame.layer(k), None, None)
        view.prev = RunView(frame, -1, k - 1, k - 1, frame.layer(k - 1), None, None)
        found = undersides(view, self.reach)
        highlight = np.zeros((frame.ny, frame.nx), bool)
        if found is not None and found["regions"] is not None:
            r0, c0 = found["crop"]
            reg = found["regions"]
            highlight[r0:r0 + reg.shape[0], c0:c0 + reg.shape[1]] = reg > 0
        name = f"{RULE}.png"
        png = picture(frame, layer=k, flat=flat, highlight=highlight, half_px=40,
                      title=f"{rule_label(RULE)}: layer {k}, z = {where[2]:.2f} mm")
        region = self.layer_map[(labels == labels.ravel()[flat]) & where_any]
        finding = Finding(RULE, self.severity, message, measured=round(angle, 1), limit=self.angle, unit="deg",
                          location_mm=where, layers=(int(region.min()), int(region.max())), count=n, picture=name)
        return output([*self.notes, finding], {name: png}, summary)

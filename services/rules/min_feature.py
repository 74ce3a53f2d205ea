"""Rule ``min_feature``: material narrower than the printer's minimum feature, on each printed layer.

Method, on every run of identical layers (shared/references/manufacturing.md section 2.1, per-layer
analysis; geometry-bench.md section 4):
* A layer section (material with the holes it encloses filled) with no place as wide as the
  free-standing limit is a free-standing feature (a pin, a fin): it is judged against
  ``unsupported_mm``. Where the profile gives only ``supported_mm``, everything is judged by that.
* Elsewhere, material left over by an exact disk opening at ``supported_mm`` is a candidate. A
  candidate pixel counts when the width across it, measured along the edge normal at its nearest
  void (``services.rules.thin``), is under the limit: that keeps necks, webs and fins and drops the
  staircase corners of wide material that no disk reaches (bench section 8, item 4), at any angle.
* Candidates are grouped into instances across layers; an instance counts when it stays thin over
  more than the limit's own height, so the rounded crest of a wide wall or a low relief is not a
  feature (the limit-sized ball of a 3-D thickness check would cover it too).

Error model: the printer grid cannot resolve widths finer than a pixel, so a limit is taken in
whole pixels, rounded down (in the part's favour by under one pixel). A straight wall sampled at
pixel centres is n pixels wide with |n px - w| < 1 px. A supported feature reports its narrowest
width across (edge to edge along the normal: within half a pixel of a straight wall's drawn width
at any angle near the limit); a free-standing one reports twice its inscribed radius on a 2x
finer distance map (exactly n for a straight wall; a round section, whose staircase cuts the rim,
takes the mean with its area-equivalent diameter: within about half a pixel). So the measured
width is within one pixel of the drawn width at any pixel size (tests: 25, 50 and 100 um) and at
any turn on the plate (tests/services/rules/test_any_angle.py).

Convention at the limit: a width is flagged when, rounded to whole pixels, it is under the limit in
whole pixels; a feature drawn exactly at the limit passes.
"""

from __future__ import annotations

import cv2
import numpy as np

from services.findings import Finding, rule_label
from services.rules import RuleOutput, raster, thin
from services.rules.common import (Groups, RuleCollector, family_check, fmt_mm, fmt_xyz, group_instances, output,
                                   picture)
from services.rules.scan import RunView, refine_width, refine_widths

RULE = "min_feature"


check = family_check(RULE, lambda: Collector)


class Collector(RuleCollector):
    """Collect thin material run by run; ``finish`` turns the instances into findings."""

    rule = RULE
    ahead = ("widths",)  # what every run needs, made ahead in the scan's second thread

    def start(self, limits: dict, *, stack, printer) -> bool:
        (self.sup_mm, self.uns_mm), self.severity, ok = self.read_limits(
            limits, printer, "minimum feature size and severity",
            {"supported_mm": "limit for supported walls (only free-standing features were checked)", "unsupported_mm": None})
        if not ok:
            return False
        px = stack.pixel_mm
        self.n_sup = raster.limit_px(self.sup_mm, px) if self.sup_mm else None
        self.n_uns = raster.limit_px(self.uns_mm, px) if self.uns_mm else None
        self.free, self.attached = Groups("min"), Groups("min")
        self._prev_free: np.ndarray | None = None  # solid label -> group id in the previous run, -1 if none
        self._prev_attached: tuple[np.ndarray, np.ndarray] | None = None  # (flat pixels, group id of each)
        return True

    def visit(self, view: RunView) -> None:
        free_lut, rows, cols, width, depth = thin_parts(view, self.n_sup, self.n_uns)
        self._visit_free(view, free_lut)
        self._visit_attached(view, rows, cols, width, depth)

    def _visit_free(self, view: RunView, free_lut: np.ndarray | None) -> None:
        if free_lut is None or not free_lut.any():
            self._prev_free = None
            return
        width, at = view.exact_widths
        labels = np.flatnonzero(free_lut)
        ids = self.free.add(width[labels], at[labels], view.first, view.last)
        lut = np.full(free_lut.size, -1)
        lut[labels] = ids
        if self._prev_free is not None and len(view.solid_links):
            a, b = self._prev_free[view.solid_links[:, 0]], lut[view.solid_links[:, 1]]
            keep = (a >= 0) & (b >= 0)
            self.free.link(a[keep], b[keep])
        self._prev_free = lut

    def _visit_attached(self, view: RunView, rows, cols, width, depth) -> None:
        if rows.size == 0:
            self._prev_attached = None
            return
        flat = rows * view.mask.shape[1] + cols
        ids = add_pixel_groups(self.attached, view, rows, cols, width, depth)
        if self._prev_attached is not None:
            link_pixels(self.attached, self._prev_attached, (flat, ids))
        self._prev_attached = (flat, ids)

    def finish(self, frame) -> RuleOutput:
        findings, figures = list(self.notes), {}
        if self.active:
            for kind, groups, limit in (("free", self.free, self.uns_mm), ("supported", self.attached, self.sup_mm)):
                if limit is not None:
                    found = self._finding(frame, kind, groups, limit)
                    if found:
                        findings.append(found[0])
                        figures.update(found[1])
        return output(findings, figures)

    def _finding(self, frame, kind: str, groups: Groups, limit: float):
        inst = groups.instances()
        tall = (inst["last"] - inst["first"] + 1) * frame.dz > limit + 1e-9
        if not tall.any():
            return None
        i = np.flatnonzero(tall)[np.argmin(inst["value"][tall])]
        k, flat = int(inst["layer"][i]), int(inst["at"][i])
        layer = frame.layer(k)
        view = RunView(frame, -1, k, k, layer, None, None)
        if kind == "free":
            width_mm = refine_width(view.filled, flat, float(inst["value"][i])) * frame.px
        else:
            width_mm = float(inst["value"][i]) * frame.px
        where = frame.location(flat, k)
        count = int(tall.sum())
        what = "free-standing feature" if kind == "free" else "wall or feature"
        message = (f"{count} {what}{'s' if count > 1 else ''} narrower than {fmt_mm(limit)} mm "
                   f"(the narrowest {width_mm:.3f} mm at {fmt_xyz(where)}); widen to at least {limit:.2f} mm.")
        name = f"{RULE}_{kind}.png"
        free_lut, rows, cols, _, _ = thin_parts(view, self.n_sup, self.n_uns)
        if kind == "free":
            highlight = free_lut[view.solid[1]]
        else:
            highlight = np.zeros_like(layer)
            highlight[rows, cols] = True
        png = picture(frame, layer=k, flat=flat, highlight=highlight, half_px=6 * raster.limit_px(limit, frame.px),
                      title=f"{rule_label(RULE)}: layer {k}, z = {where[2]:.2f} mm")
        listed = group_instances(frame, inst, tall)
        finding = Finding(RULE, self.severity, message, measured=round(width_mm, 4), limit=limit, unit="mm",
                          location_mm=where, layers=(int(inst["first"][i]), int(inst["last"][i])), count=count,
                          picture=name, instances=listed)
        return finding, {name: png}


def thin_parts(view: RunView, n_sup: int | None, n_uns: int | None):
    """Return the thin material of one run.

    (free-standing section labels as a lookup or None, then rows, cols, width px and depth px
    (distance to the nearest void) of the thin pixels judged against the supported limit).
    """
    free_lut = _narrow_labels(view, n_uns) if n_uns is not None else None
    none = np.zeros(0, np.int64)
    if n_sup is None:
        return free_lut, none, none, np.zeros(0), np.zeros(0)
    rs, cs = view.window  # open air beyond it: the opening there is empty
    mask = view.mask[rs, cs]
    opened = raster.open_disk(mask, n_sup)
    rows, cols = raster.coords(mask & ~opened)
    keep = ~_next_to(opened, rows, cols)  # one pixel of staircase tolerance
    if free_lut is not None and rows.size:
        keep &= ~free_lut[view.solid_in_window[1][rows, cols]]
    rows, cols = rows[keep] + rs.start, cols[keep] + cs.start
    if rows.size == 0:
        return free_lut, none, none, np.zeros(0), np.zeros(0)
    width, depth = thin.widths_at(view.mask, rows, cols, n_sup)
    keep = thin.is_under(width, n_sup)
    return free_lut, rows[keep], cols[keep], width[keep], depth[keep]


def _next_to(mask: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Return whether each pixel has a pixel of ``mask`` among its 8 neighbours (or itself)."""
    if rows.size == 0:
        return np.zeros(0, bool)
    r0, c0 = max(int(rows.min()) - 1, 0), max(int(cols.min()) - 1, 0)
    crop = mask[r0:int(rows.max()) + 2, c0:int(cols.max()) + 2].view(np.uint8)
    grown = cv2.dilate(crop, np.ones((3, 3), np.uint8), borderType=cv2.BORDER_CONSTANT, borderValue=0)
    return grown[rows - r0, cols - c0].astype(bool)


def add_pixel_groups(groups: Groups, view: RunView, rows, cols, width, depth) -> np.ndarray:
    """Label thin pixels into components, add them to ``groups`` and return each pixel's group id.

    A component's value is its narrowest width across; its worst pixel is its deepest (farthest from
    its edge), where the reader finds the feature's middle.
    """
    count, plab, _ = raster.pixel_labels(rows, cols, view.mask.shape)
    index = plab.astype(np.intp)
    narrowest = np.full(count, np.inf)
    np.minimum.at(narrowest, index, width.astype(np.float64))
    best = np.full(count, -np.inf)
    np.maximum.at(best, index, depth.astype(np.float64))  # matching dtypes: numpy's fast path
    at = np.zeros(count, np.int64)
    top = np.flatnonzero(depth >= best[plab])
    at[plab[top]] = rows[top] * view.mask.shape[1] + cols[top]
    ids = groups.add(narrowest[1:], at[1:], view.first, view.last)
    return ids[plab - 1]


def link_pixels(groups: Groups, prev: tuple[np.ndarray, np.ndarray], cur: tuple[np.ndarray, np.ndarray]) -> None:
    """Join the groups of pixels that sit at the same place in consecutive runs."""
    pf, pid = prev
    order = np.argsort(pf, kind="stable")
    pf, pid = pf[order], pid[order]
    cf, cid = cur
    pos = np.clip(np.searchsorted(pf, cf), 0, pf.size - 1)
    same = pf[pos] == cf
    if same.any():
        keys = pid[pos[same]].astype(np.int64) << 32 | cid[same]
        keys = np.unique(keys[np.r_[True, keys[1:] != keys[:-1]]])  # neighbouring pixels mostly repeat a pair
        groups.link(keys >> 32, keys & 0xFFFFFFFF)


def _narrow_labels(view: RunView, n_px: int) -> np.ndarray:
    """Return a lookup: sections with no place as wide as ``n_px`` (2x-refined near the edge)."""
    rough, _ = view.widths
    if not ((rough > 0) & (rough < n_px + 4)).any():
        return np.zeros(rough.size, bool)  # the half-grid widths rule every section out
    width, at = view.exact_widths
    narrow = (width > 0) & (width < n_px)
    edge = np.flatnonzero(narrow & (width >= n_px - 1.5))
    if edge.size:
        narrow[edge] = thin.is_under(refine_widths(view, at[edge], width[edge]), n_px)
    return narrow

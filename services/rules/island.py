"""Rule ``island``: regions of a layer that rest on nothing below (unsupported starts).

Two kinds, both from the step between a layer and the one below it (``services.rules.overhang``):
* a component of new material that touches no material of the layer below: it starts in mid-air;
* a flat start: new material that reaches farther beyond the layer below than four
  self-supporting steps in one layer (a bar across a post, a flat ceiling), which starts in
  mid-air over that width.
Layer 0 rests on the build plate. Every island is one instance; a field of identical islands is one
finding with a count, the largest given as the worst.
"""

from __future__ import annotations

import cv2
import numpy as np

from services.findings import Finding, instance_rows, rule_label
from services.numbers_text import significant
from services.rules import raster
from services.rules.common import RuleCollector, family_check, fmt_xyz, output, picture, severity_of
from services.rules.overhang import FLAT_STEPS, reach_px, undersides
from services.rules.scan import RunView

RULE = "island"


check = family_check(RULE, lambda: Collector)


class Collector(RuleCollector):
    """Collect unsupported starts run by run."""

    rule = RULE

    def start(self, limits: dict, *, stack, printer) -> bool:
        self.severity = severity_of(limits)
        if self.missing(printer, "severity for islands", self.severity is None):
            return False
        self.reach = reach_px(printer, stack)
        self.missing(printer, "self-supporting angle (flat starts were not checked)", self.reach is None)
        self.found: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []  # (area px, flat index, layer)
        return True

    def visit(self, view: RunView) -> None:
        found = undersides(view, self.reach)
        if found is None:
            return
        starts, count = island_labels(found, self.reach)
        if count <= 1:
            return
        area = np.bincount(starts.ravel(), minlength=count)[1:]
        r0, c0 = found["crop"]
        inside = starts > 0
        depth = cv2.distanceTransform(inside.view(np.uint8), cv2.DIST_L2, 3)
        _, at = raster.per_label_max(depth, starts, count, inside)  # each island's middle
        rows, cols = np.divmod(at[1:], starts.shape[1])
        flat = (rows + r0) * view.mask.shape[1] + cols + c0
        self.found.append((area, flat, np.full(area.size, view.first)))

    def finish(self, frame):
        if not self.active or not self.found:
            return output(list(self.notes))
        area, flat, layer = (np.concatenate(c) for c in zip(*self.found))
        i = int(np.argmax(area))
        k, at = int(layer[i]), int(flat[i])
        area_mm2 = float(area[i]) * frame.px ** 2
        where = frame.location(at, k)
        n = int(area.size)
        message = (f"{n} region{'s' if n > 1 else ''} of a layer rest{'' if n > 1 else 's'} on nothing below "
                   f"(the largest {significant(area_mm2)} mm2 at {fmt_xyz(where)}); add supports under "
                   f"{'them' if n > 1 else 'it'} or turn the part.")
        view = RunView(frame, -1, k, k, frame.layer(k), None, None)
        view.prev = RunView(frame, -1, k - 1, k - 1, frame.layer(k - 1), None, None)
        starts, _ = island_labels(undersides(view, self.reach), self.reach)
        highlight = np.zeros((frame.ny, frame.nx), bool)
        r0, c0 = undersides(view, self.reach)["crop"]
        highlight[r0:r0 + starts.shape[0], c0:c0 + starts.shape[1]] = starts > 0
        name = f"{RULE}.png"
        png = picture(frame, layer=k, flat=at, highlight=highlight, half_px=int(2 * np.sqrt(area[i])) + 20,
                      title=f"{rule_label(RULE)}: layer {k}, z = {where[2]:.2f} mm")
        listed = instance_rows(frame, measured=area * frame.px ** 2, flats=flat, layers=layer, firsts=layer,
                               lasts=layer, worst="max")
        finding = Finding(RULE, self.severity, message, measured=round(area_mm2, 4), unit="mm2",
                          location_mm=where, layers=(k, k), count=n, picture=name, instances=listed)
        return output([*self.notes, finding], {name: png})


def island_labels(found: dict, reach: float | None) -> tuple[np.ndarray, int]:
    """Return (labels of the unsupported starts in the crop, count including 0)."""
    starts = found["islands"] > 0
    if reach is not None and found["regions"] is not None:
        flat = found["reach"] > FLAT_STEPS * reach
        flat[0] = False
        starts = starts | flat[found["regions"]]
    count, labels = raster.label(starts, 8)
    return labels, count

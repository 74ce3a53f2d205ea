"""Rule ``aspect_ratio``: free-standing features (pins, pillars, fins) too tall for their width.

Layer-to-layer component tracking: each material component of a layer sits on the components of
the layer below it overlaps. A component with one such parent continues the parent's feature while
it is at least half the parent's width and at most twice the feature's narrowest width so far; one
much narrower than what it stands on (a pin on a plate), much wider than the feature below (a bar on
a post, the bulk of a ball on its first layers), standing on several (a merge) or on nothing starts
a new feature there, at the height where it joins.

A feature's slenderness is the largest ratio, over its layers, of the height of the feature above
that layer to the layer's width (twice the inscribed radius): for a straight pin it is height over
width from where it joins the larger body; a cone counts by its base and the thin top of a dome
never counts, because little stands above it. It is compared with the profile's caution and
blocker limits.

Error model: widths are within one pixel (2x-refined for the features reported), heights within
one layer.
"""

from __future__ import annotations

import numpy as np

from services.findings import INSTANCES_SHOWN, Finding, instance_rows, rule_label
from services.rules import RuleOutput
from services.rules.common import RuleCollector, family_check, fmt_xyz, output, picture
from services.rules.scan import RunView, refine_widths

RULE = "aspect_ratio"


check = family_check(RULE, lambda: Collector)


class Collector(RuleCollector):
    """Track features upward and keep each layer's width as a section of its feature."""

    rule = RULE
    ahead = ("widths",)  # what every run needs, made ahead in the scan's second thread

    def start(self, limits: dict, *, stack, printer) -> bool:
        (self.caution, self.blocker), _, ok = self.read_limits(
            limits, printer, "height-to-width limit (caution or blocker)",
            {key: f"{key} limit for slender features" for key in ("caution", "blocker")}, severity=False)
        if not ok:
            return False
        self._tracks = 0
        self._narrowest = np.zeros(0)  # per feature: its narrowest width so far (px)
        self._prev: tuple[np.ndarray, np.ndarray] | None = None  # (track per label, width per label)
        self._sections: list[tuple[np.ndarray, ...]] = []
        self._top: list[np.ndarray] = []
        return True

    def visit(self, view: RunView) -> None:
        count, _ = view.solid_in_window
        if count <= 1:
            self._prev = None
            return
        width, at = view.widths
        track = self._continue(view, count, width)
        live = np.arange(1, count)
        self._sections.append((track[live], np.full(live.size, view.first), np.full(live.size, view.last),
                               width[live], at[live]))
        self._top.append(np.column_stack([track[live], np.full(live.size, view.z_hi)]))
        self._prev = (track, width)

    def _continue(self, view: RunView, count: int, width: np.ndarray) -> np.ndarray:
        """Return the feature id of each label: the parent's where it continues, else a new one."""
        track = np.arange(self._tracks, self._tracks + count)
        narrowest = np.concatenate([self._narrowest, width])
        if self._prev is not None and len(view.solid_links):
            prev_track, prev_width = self._prev
            parent, child = view.solid_links[:, 0], view.solid_links[:, 1]
            single = np.bincount(child, minlength=count) == 1
            keep = (single[child] & (width[child] >= prev_width[parent] / 2)
                    & (width[child] <= 2 * narrowest[prev_track[parent]]))
            track[child[keep]] = prev_track[parent[keep]]
            np.minimum.at(narrowest, track[child[keep]].astype(np.intp), width[child[keep]].astype(np.float64))
        self._tracks += count
        self._narrowest = narrowest
        return track

    def finish(self, frame) -> RuleOutput:
        if not self.active or not self._sections:
            return output(list(self.notes))
        ratio, best = self._slenderness(frame)
        findings, figures = list(self.notes), {}
        worst = ratio[best] if best.size else np.zeros(0)
        bands = [("blocker", self.blocker, np.inf), ("caution", self.caution, self.blocker or np.inf)]
        for severity, low, high in bands:
            if low is None:
                continue
            hit = (worst > low) & (worst <= high)
            if hit.any():
                finding, png = self._finding(frame, severity, low, best[hit], ratio)
                findings.append(finding)
                figures.update(png)
        return output(findings, figures)

    def _slenderness(self, frame) -> tuple[np.ndarray, np.ndarray]:
        """Return each section's ratio (refined where it matters) and each feature's worst section."""
        self.track, self.first, self.last, self.width, self.at = (np.concatenate(c) for c in zip(*self._sections))
        top = np.concatenate(self._top)
        z_top = np.zeros(self._tracks)
        np.maximum.at(z_top, top[:, 0].astype(np.int64), top[:, 1])
        self.height = z_top[self.track] - self.first * frame.dz
        ratio = self.height / np.maximum(self.width * frame.px, 1e-12)
        best = _argmax_per(self.track, ratio)
        low = min(v for v in (self.caution, self.blocker) if v is not None)
        _refine(frame, self, best[ratio[best] > low * 0.6])  # half-grid widths: within ~2 px
        ratio = self.height / np.maximum(self.width * frame.px, 1e-12)
        return ratio, _argmax_per(self.track, ratio)

    def _finding(self, frame, severity: str, limit: float, sections: np.ndarray, ratio: np.ndarray):
        i = sections[np.argmax(ratio[sections])]
        k, flat = int(self.first[i]), int(self.at[i])
        width_mm, height_mm = float(self.width[i] * frame.px), float(self.height[i])
        where = frame.location(flat, k)
        layers = _track_layers(self, int(self.track[i]))
        count = int(sections.size)
        message = (f"{count} free-standing feature{'s' if count > 1 else ''} taller than {limit:g} times "
                   f"{'their' if count > 1 else 'its'} width (the most slender {ratio[i]:.1f}: {height_mm:.2f} mm "
                   f"above a {width_mm:.3f} mm section at {fmt_xyz(where)}); widen to at least "
                   f"{height_mm / limit:.2f} mm, shorten it or brace it.")
        name = f"{RULE}_{severity}.png"
        view = RunView(frame, -1, k, k, frame.layer(k), None, None)
        _, labels = view.solid
        highlight = labels == labels.ravel()[flat]
        png = picture(frame, layer=k, flat=flat, highlight=highlight, half_px=int(3 * self.width[i]) + 10,
                      title=f"{rule_label(RULE)}: layer {k}, z = {where[2]:.2f} mm")
        top = sections[np.argsort(-ratio[sections], kind="stable")[:INSTANCES_SHOWN]]  # layer spans cost a search each
        spans = [_track_layers(self, int(self.track[j])) for j in top]
        listed = instance_rows(frame, measured=ratio[top], flats=self.at[top], layers=self.first[top],
                               firsts=[a for a, _ in spans], lasts=[b for _, b in spans], worst="max")
        finding = Finding(RULE, severity, message, measured=round(float(ratio[i]), 2), limit=limit, unit="ratio",
                          location_mm=where, layers=layers, count=count, picture=name, instances=listed)
        return finding, {name: png}


def _argmax_per(group: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Return, for every group present, the index of its largest value."""
    order = np.lexsort((-values, group))
    return order[np.r_[True, group[order][1:] != group[order][:-1]]]


def _refine(frame, sections, idx: np.ndarray) -> None:
    """Replace the widths of the given sections by the 2x-refined width, unpacking each layer once."""
    for k in np.unique(sections.first[idx]).tolist():
        view = RunView(frame, -1, k, k, frame.layer(k), None, None)
        mine = idx[sections.first[idx] == k]
        sections.width[mine] = refine_widths(view, sections.at[mine], sections.width[mine])


def _track_layers(sections, track: int) -> tuple[int, int]:
    mine = sections.track == track
    return int(sections.first[mine].min()), int(sections.last[mine].max())

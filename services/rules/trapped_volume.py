"""Rule ``trapped_volume``: sealed cavities, and (vat processes) cups sealed against the vat film.

The void of each layer is split into the open air (connected to the frame's edge) and enclosed
pockets; pockets that overlap from one layer to the next are one cavity (the flood-fill of
shared/references/manufacturing.md section 2.2 done in print order with union-find). A cavity
that never meets the open air, does not reach the last layer (open above) and does not start on the
build plate (open below once the part is taken off) is sealed: uncured resin or unfused powder stays
inside (severity from the profile: a blocker for vat and powder processes, a note for extrusion).

Cups: while layer k is printed, a pocket of layer k whose cavity has not met the open air in layers
0..k is closed towards the build plate and sealed by the vat film at every peel (manufacturing.md
section 2.2, cupping). Reported for vat photopolymerisation, for cavities whose largest section is at
least a drain hole's area, and not for cavities already reported as sealed.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from services.findings import Finding, rule_label
from services.numbers_text import significant
from services.rules.common import RuleCollector, family_check, fmt_xyz, limit_mm, output, picture, severity_of
from services.rules.scan import RunView

RULE = "trapped_volume"
SPECK_PX = 4  # pockets under 4 pixels are specks where the pixel grid closes a diagonal, not cavities


check = family_check(RULE, lambda: Collector)


class Collector(RuleCollector):
    """Follow enclosed pockets up the stack and join them into cavities."""

    rule = RULE
    ahead = ("void",)  # what every run needs, made ahead in the scan's second thread

    def __init__(self, *, stack, part, printer) -> None:
        self._part = part  # for the optical zone, read only if a cup is found
        super().__init__(stack=stack, part=part, printer=printer)

    def start(self, limits: dict, *, stack, printer) -> bool:
        self.severity = severity_of(limits)
        self.vat = printer.process == "vat_photopolymerisation"
        self.cup_severity = severity_of(limits, "cup_severity") if self.vat else None
        self.drain_mm = limit_mm(limits, "drain_hole_mm")
        if self.missing(printer, "severity for sealed cavities", self.severity is None):
            return False
        self.missing(printer, "drain-hole diameter (no hole size is suggested)", self.vat and self.drain_mm is None)
        self.missing(printer, "severity for cups (cups were not checked)", self.vat and self.cup_severity is None)
        self.count = stack.count
        self.nodes: list[tuple[np.ndarray, ...]] = []  # per run: area px, flat index, first, last
        self.size = 0
        self.parent: list[int] = []
        self.open: list[bool] = []
        self.cup: list[bool] = []
        self.edges: list[tuple[int, int]] = []
        self._prev: np.ndarray | None = None  # void label -> node id in the previous run, -1 for open air
        return True

    def visit(self, view: RunView) -> None:
        count, labels, outside = view.void
        pockets = np.flatnonzero(~outside)
        pockets = pockets[pockets > 0]
        lut = np.full(count, -1)
        specks = pockets[view.void_area[pockets] < SPECK_PX]
        lut[specks] = -2
        pockets = pockets[view.void_area[pockets] >= SPECK_PX]
        if pockets.size:
            lut[pockets] = self._add(view, pockets)
        if self._prev is not None and (pockets.size or (self._prev >= 0).any()):
            self._link(view.void_links, self._prev, lut)
        for node in lut[pockets].tolist():
            self.cup.append(not self.open[self._find(node)])
        self._prev = lut

    def _add(self, view: RunView, pockets: np.ndarray) -> np.ndarray:
        n = pockets.size
        ids = np.arange(self.size, self.size + n)
        self.nodes.append((view.void_area[pockets], view.void_first_pixel(pockets), np.full(n, view.first),
                           np.full(n, view.last)))
        self.size += n
        self.parent.extend(ids.tolist())
        self.open.extend([False] * n)
        return ids

    def _link(self, pairs: np.ndarray, prev: np.ndarray, lut: np.ndarray) -> None:
        for a, b in zip(prev[pairs[:, 0]].tolist(), lut[pairs[:, 1]].tolist()):
            if a == -2 or b == -2:
                continue
            if a >= 0 and b >= 0:
                self.edges.append((a, b))
                self._union(a, b)
            elif a >= 0 or b >= 0:
                self.open[self._find(max(a, b))] = True

    def _find(self, node: int) -> int:
        root = node
        while self.parent[root] != root:
            root = self.parent[root]
        while self.parent[node] != root:
            self.parent[node], node = root, self.parent[node]
        return root

    def _union(self, a: int, b: int) -> None:
        ra, rb = self._find(a), self._find(b)
        if ra != rb:
            self.parent[rb] = ra
            self.open[ra] = self.open[ra] or self.open[rb]

    def finish(self, frame):
        if not self.active or self.size == 0:
            return output(list(self.notes))
        area, at, first, last = (np.concatenate(c) for c in zip(*self.nodes))
        edges = np.array(self.edges, np.int64).reshape(-1, 2)
        graph = coo_matrix((np.ones(len(edges)), (edges[:, 0], edges[:, 1])), shape=(self.size, self.size))
        n, cavity = connected_components(graph, directed=False)
        opened = np.zeros(n, bool)
        opened[cavity[np.array([self.open[self._find(i)] for i in range(self.size)])]] = True
        opened[cavity[(first == 0) | (last == self.count - 1)]] = True
        findings, figures = list(self.notes), {}
        volume = np.bincount(cavity, weights=area * (last - first + 1), minlength=n) * frame.px ** 2 * frame.dz
        self._span = (first, last)
        for found in (self._sealed(frame, cavity, ~opened, volume, area, at, first),
                      self._cups(frame, cavity, opened, area, at, first)):
            if found:
                findings.append(found[0])
                figures.update(found[1])
        return output(findings, figures)

    def _sealed(self, frame, cavity, sealed, volume, area, at, first):
        if not sealed.any():
            return None
        worst = int(np.flatnonzero(sealed)[np.argmax(volume[sealed])])
        node = _lowest(cavity, first, worst)
        k, flat, count = int(first[node]), int(at[node]), int(sealed.sum())
        where = frame.location(flat, k)
        fix = (f"add a drain hole of {self.drain_mm:g} mm or more near {fmt_xyz(where)} (the end nearest the build "
               "plate) and a vent at the far end" if self.drain_mm else "it stays hollow; mind its effect on the "
               "effective permittivity")
        message = (f"{count} sealed cavit{'ies' if count > 1 else 'y'} trap{'' if count > 1 else 's'} material "
                   f"(the largest {volume[worst]:.1f} mm3); {fix}.")
        mine = cavity == worst
        return self._finding(frame, self.severity, "sealed", message, float(volume[worst]), "mm3", flat, k,
                             self._layers(mine), count)

    def _cups(self, frame, cavity, opened, area, at, first):
        if self.cup_severity is None:
            return None
        cup = np.array(self.cup, bool)
        least = math.pi / 4 * (self.drain_mm / frame.px) ** 2 if self.drain_mm else 0.0
        big = np.zeros(cavity.max() + 1, bool)
        big[cavity[cup & (area >= least)]] = True
        big &= opened
        if not big.any():
            return None
        largest = np.zeros(big.size)
        np.maximum.at(largest, cavity[cup], area[cup])
        worst = int(np.flatnonzero(big)[np.argmax(largest[big])])
        node = _lowest(cavity, first, worst)
        k, flat, count = int(first[node]), int(at[node]), int(big.sum())
        hole = f" of {self.drain_mm:g} mm or more" if self.drain_mm else ""
        cup_text = (f"{count} hollow{'s' if count > 1 else ''} open only away from the build plate will act as "
                    f"suction cups against the vat film (the largest {significant(largest[worst] * frame.px ** 2)} mm2 in "
                    "section); ")
        zone = self._optical_zone(frame)
        outside = [] if zone is None else [i for i in np.flatnonzero(cavity == worst) if not zone.flat[int(at[i])]]
        if zone is None:
            fix = f"add a vent hole{hole} near {fmt_xyz(frame.location(flat, k))} or turn the part so the opening faces the build plate."
        elif outside:
            node = min(outside, key=lambda i: first[i])  # a vent in the mount ring, not through the optic
            k, flat = int(first[node]), int(at[node])
            fix = (f"add a vent hole{hole} near {fmt_xyz(frame.location(flat, k))}, in the mount outside the optical "
                   "zone (never through the optic), or turn the part so the opening faces the build plate.")
        else:
            fix = (f"{'the largest' if count > 1 else 'it'} lies inside the optical zone, where a vent hole would "
                   "cut the optic: turn the part so the "
                   "opening faces the build plate (or print it on a process without a vat film).")
        message = cup_text + fix
        mine = cavity == worst
        return self._finding(frame, self.cup_severity, "cup", message, float(largest[worst] * frame.px ** 2), "mm2",
                             flat, k, self._layers(mine), count)

    def _optical_zone(self, frame) -> np.ndarray | None:
        """Return a generated optic's optical zone on the frame's pixels (its clear aperture: inside its mount, or
        its whole outline); None for an uploaded part, whose optic the check can only guess (a cup-shaped holder
        would read as a thin optic), so its vent is placed where the cavity is."""
        from services.optics.aperture import clear_aperture
        from services.optics.grids import part_axis_mm

        if not (self._part.parameters or {}).get("kind"):
            return None
        aperture = clear_aperture(frame.stack, axis_mm=part_axis_mm(self._part), parameters=self._part.parameters)
        if not aperture.mask.any() or aperture.mask.shape != frame.stack.shape:
            return None
        return frame.pad_mask(aperture.mask)

    def _layers(self, mine: np.ndarray) -> tuple[int, int]:
        first, last = self._span
        return int(first[mine].min()), int(last[mine].max())

    def _finding(self, frame, severity, kind, message, measured, unit, flat, k, layers, count):
        view = RunView(frame, -1, k, k, frame.layer(k), None, None)
        name = f"{RULE}_{kind}.png"
        png = picture(frame, layer=k, flat=flat, highlight=view.enclosed, half_px=200,
                      title=f"{rule_label(RULE)}: layer {k}, z = {frame.z_mm(k):.2f} mm")
        finding = Finding(RULE, severity, message, measured=round(measured, 3), unit=unit,
                          location_mm=frame.location(flat, k), layers=layers, count=count, picture=name)
        return finding, {name: png}


def _lowest(cavity: np.ndarray, first: np.ndarray, which: int) -> int:
    """Return the node of a cavity nearest the build plate."""
    mine = np.flatnonzero(cavity == which)
    return int(mine[np.argmin(first[mine])])

"""What the rule families share: limits from the profile, grouping into instances, findings with pictures."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from services import pictures
from services.findings import SEVERITIES, Finding, instance_rows
from services.numbers_text import significant
from services.rules import RuleOutput


def limit_mm(limits: dict, key: str) -> float | None:
    """Return a positive numeric limit from a rule's limits, or None when the profile lacks it."""
    value = limits.get(key)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
        return None
    return float(value)


def severity_of(limits: dict, key: str = "severity") -> str | None:
    value = limits.get(key)
    return value if value in SEVERITIES else None


def missing_note(rule: str, printer, what: str) -> Finding:
    """Return the note a rule leaves when the profile lacks a limit it needs (no guessing)."""
    return Finding(rule, "note", f"Not checked: printer profile {printer.name!r} gives no {what}.")


def family_check(rule: str, collector: Callable[[], type], doc: str | None = None):
    """Return a family's own ``check(*, stack, part, printer)``: its collector alone, in a pass over the stack.

    ``collector`` returns the family's collector class (called late, so a module can name a class defined
    below). The registry runs all families in one shared pass instead; a rule module never imports it.
    """
    def check(*, stack, part, printer):
        from services.rules import scan

        return scan.outputs(stack, part, printer, {rule: collector()})[rule]

    check.__doc__ = doc or f"Return the {rule} findings on the layer stack."
    return check


def group_instances(frame, inst: dict, chosen: np.ndarray) -> tuple[dict, ...]:
    """Return the listed instances of a Groups result (``Groups.instances()``) where ``chosen``, widths in mm."""
    rows = np.flatnonzero(chosen)
    return instance_rows(frame, measured=inst["value"][rows] * frame.px, flats=inst["at"][rows],
                         layers=inst["layer"][rows], firsts=inst["first"][rows], lasts=inst["last"][rows])


def bounded_instances(frame, found: dict, chosen: np.ndarray) -> tuple[dict, ...]:
    """Return the listed instances of bounded voids (``Bounded.instances()``) where ``chosen``, heights in mm."""
    rows = np.flatnonzero(chosen)
    base, height = found["base_mm"][rows], found["height_mm"][rows]
    mid = np.minimum(((base + height / 2) / frame.dz).astype(int), frame.stack.count - 1)
    return instance_rows(frame, measured=height, flats=found["at"][rows], layers=mid,
                         firsts=np.round(base / frame.dz).astype(int),
                         lasts=np.round((base + height) / frame.dz).astype(int) - 1)


class RuleCollector:
    """Start of every family's collector: off unless the profile has the rule, notes for missing limits.

    A family sets ``rule`` and writes ``start(limits, stack=, printer=)``, which reads its limits,
    records what is missing with ``missing`` and returns whether the family runs.
    """

    rule = ""
    pad_px = 2
    reach_px = 0  # how far past a run's material this family looks (RunView.window grows by at least this)
    ahead: tuple[str, ...] = ()  # RunView parts this family reads on every run, worth making ahead (scan._run)

    def __init__(self, *, stack, part, printer) -> None:
        limits = printer.rule(self.rule)
        self.active = False
        self.notes: list[Finding] = []
        if limits is None:
            return
        self.active = bool(self.start(limits, stack=stack, printer=printer))

    def start(self, limits: dict, *, stack, printer) -> bool:
        raise NotImplementedError

    def missing(self, printer, what: str, when: bool = True) -> bool:
        """Record the note for a limit the profile lacks when ``when`` holds; return ``when``."""
        if when:
            self.notes.append(missing_note(self.rule, printer, what))
        return when

    def read_limits(self, limits: dict, printer, needed: str, each: dict[str, str | None], severity: bool = True):
        """Return the limits named in ``each`` (None where missing), the severity and whether the family runs.

        Notes ``needed`` when no limit (or no severity) is given; otherwise notes each missing limit
        whose entry in ``each`` says what it is.
        """
        values = [limit_mm(limits, key) for key in each]
        level = severity_of(limits) if severity else None
        if self.missing(printer, needed, (severity and level is None) or all(v is None for v in values)):
            return values, level, False
        for what, value in zip(each.values(), values):
            self.missing(printer, what, what is not None and value is None)
        return values, level, True


class Groups:
    """Components found run by run, joined into instances where they touch from one run to the next.

    Each component carries a value (smaller is worse unless ``worst="max"``), the flat frame index
    of its worst pixel and the layers it spans.
    """

    def __init__(self, worst: str = "min") -> None:
        self.worst = worst
        self._parts: list[tuple[np.ndarray, ...]] = []
        self._links: list[np.ndarray] = []
        self.size = 0

    def add(self, values, at, first: int, last: int, weight=None) -> np.ndarray:
        """Add components of one run; return their ids."""
        values = np.asarray(values, np.float64)
        n = values.size
        ids = np.arange(self.size, self.size + n)
        weight = np.ones(n) if weight is None else np.asarray(weight, np.float64)
        self._parts.append((values, np.asarray(at, np.int64), np.full(n, first), np.full(n, last), weight))
        self.size += n
        return ids

    def link(self, a: np.ndarray, b: np.ndarray) -> None:
        """Join components a[i] and b[i] into one instance."""
        if len(a):
            self._links.append(np.column_stack([a, b]).astype(np.int64))

    def instances(self) -> dict[str, np.ndarray]:
        """Return per instance: value, at, layer (of the worst), first, last, weight (summed)."""
        if self.size == 0:
            return {k: np.zeros(0) for k in ("value", "at", "layer", "first", "last", "weight")}
        values, at, first, last, weight = (np.concatenate(c) for c in zip(*self._parts))
        edges = np.concatenate(self._links) if self._links else np.zeros((0, 2), np.int64)
        graph = coo_matrix((np.ones(len(edges)), (edges[:, 0], edges[:, 1])), shape=(self.size, self.size))
        n, group = connected_components(graph, directed=False)
        key = values if self.worst == "min" else -values
        order = np.lexsort((key, group))
        head = order[np.r_[True, group[order][1:] != group[order][:-1]]]  # worst component of each instance
        lo = np.full(n, np.iinfo(np.int64).max)
        hi = np.full(n, -1)
        np.minimum.at(lo, group, first)
        np.maximum.at(hi, group, last)
        total = np.bincount(group, weights=weight, minlength=n)
        g = group[head]
        return {"value": values[head], "at": at[head], "layer": first[head], "first": lo[g], "last": hi[g],
                "weight": total[g]}


def picture(frame, *, layer: int, flat: int, highlight: np.ndarray, title: str, half_px: int) -> bytes:
    """Return a PNG crop of a layer around a frame pixel: material, highlighted pixels, mm scale bar."""
    mask = frame.layer(layer)
    r, c = divmod(int(flat), frame.nx)
    half = int(min(max(half_px, 24), 400))
    r0, r1 = max(r - half, 0), min(r + half + 1, frame.ny)
    c0, c1 = max(c - half, 0), min(c + half + 1, frame.nx)
    return pictures.layer_crop_png(mask[r0:r1, c0:c1], highlight[r0:r1, c0:c1].astype(bool),
                                   pixel_mm=frame.px, title=title)


def output(findings: list[Finding], figures: dict | None = None, summary: dict | None = None) -> RuleOutput:
    return RuleOutput(tuple(findings), figures or {}, summary or {})


def fmt_mm(value: float) -> str:
    """Return a length for a message: 0.12 mm, 1.5 mm, 12 mm, 1,200 mm."""
    return significant(value)


def fmt_xyz(location: tuple[float, float, float]) -> str:
    return "({:.2f}, {:.2f}, {:.2f}) mm".format(*location)

"""What must change: for a part with blockers, the changes that remove them, each tried, not guessed.

For each candidate (the part turned over or onto its side on the same printer; another printer of the lab
that can print the material; another printer and material of the lab) the printability part of the check
is run again: orientation, slicing at that printer's grid, every design rule, build fit and the estimate.
Layers already made are not made or checked twice: a part turned over reads its own (``layers.turned_over``),
and a turn whose layers are the part's own or an earlier turn's, turned in the plane, takes that result.
The best three that remove blockers are kept, with the numbers they would give. The optics are not re-run
(a new material changes them; the suggestion says so).
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
from dataclasses import asdict, dataclass, replace

import numpy as np

from services import layers
from services.errors import UnusableInput
from services.findings import Finding
from services.part import Part
from services.profiles import Material, PrinterProfile, check_pairing
from services.rules import run_rules, scan
from services.rules.build_fit import check_build_fit
from services.settings import CheckSettings

# Orientations worth trying for a flat optic: upside down first, then on its sides.
TURNS = {"+z": ("-z", "+x", "+y"), "-z": ("+z", "+x", "+y")}
SHOWN = 3


@dataclass(frozen=True, slots=True)
class TriedChange:
    """A change the check tried: in words, its kind, and the printer and material (slugs) it leads to."""

    change: str
    kind: str  # "orientation" | "scale" | "material" | "printer" | "printer_and_material"
    printer: str
    material: str


@dataclass(frozen=True, slots=True)
class Alternative(TriedChange):
    """One change tried for the blockers, and what the check found after it."""

    orientation: str
    blockers: int
    cautions: int
    blockers_removed: tuple[str, ...]
    print_time_s: float | None
    cost_one: float | None
    currency: str | None
    note: str | None = None
    scale: float | None = None  # the uniform scale of a "scale" change
    also_orientations: tuple[str, ...] = ()  # other turns whose layers are these, turned in the plane: the same result

    def to_dict(self) -> dict:
        d = asdict(self)
        d["blockers_removed"] = list(self.blockers_removed)
        d["also_orientations"] = list(self.also_orientations)
        return d


def what_must_change(*, part: Part, printer: PrinterProfile, material: Material, settings: CheckSettings,
                     findings: Sequence[Finding],
                     catalogue: Sequence[tuple[PrinterProfile, Material]] | Callable[[], Sequence] = (),
                     budget_s: float = 60.0, progress: Callable[[float], None] | None = None,
                     at_once: int = 2, unfinished: list[str] | None = None,
                     rules_s_per_work: float | None = None, stack: layers.LayerStack | None = None) -> list[Alternative]:
    """Return up to three changes that remove blockers from the part, best first (empty: no blockers to remove).

    ``catalogue`` is the lab's (printer, material) pairs to try besides the part's own, or a function returning
    them (called only when something blocks, so a clean part costs no catalogue read); ``budget_s`` bounds the
    work (candidates are tried cheapest first, the search stops when the budget is spent, and a change whose own
    pace shows it cannot end within the budget stops early, leaving the cores to the others); ``at_once``
    candidates are tried side by side (1 where memory is tight: each holds its own layer stack). ``unfinished``,
    when given, receives the sentence of each change not finished within the budget (stopped, or never started),
    so that a report can say what was left untried rather than let "nothing found" stand for it.
    ``rules_s_per_work``, the part's own rules pass's seconds per unit of work (``scan.pass_work``), projects a
    tried change's rules from its sliced stack before they start: one that cannot end in time is not begun.
    ``stack``, the part's own layers at ``printer``'s grid: a turn whose layers are these, turned or mirrored in
    the plane, changes nothing the rules can see and is not checked again; likewise a turn whose layers are an
    earlier turn's takes that turn's result (a part symmetric about its axis is the same on +x and on +y) and is
    named with it.
    """
    blockers = [f for f in findings if f.severity == "blocker"]
    # Mesh defects go with the part wherever it is printed: no printer or orientation removes them.
    if not blockers or any(f.rule == "mesh_health" for f in blockers):
        return []
    before = {f.rule for f in blockers}
    pairs = catalogue() if callable(catalogue) else catalogue
    candidates = _candidates(printer, material, settings.orientation, pairs)
    candidates = _one_material_per_printer(candidates)
    factor = scale_to_clear(blockers)
    if factor is not None:  # after the orientations: a scaled part is a different design
        candidates.insert(len(TURNS.get(settings.orientation, ("+z",))), ("scale", printer, material, settings.orientation))

    deadline = time.monotonic() + budget_s

    stopped = set()
    seen = _SameLayers(stack, {i: layers.oriented_extent_mm(part, c[3]) for i, c in enumerate(candidates)
                               if c[0] == "orientation"})

    def attempt(i: int, candidate) -> Alternative | _Twin | None:
        kind, cand_printer, cand_material, orientation = candidate
        scaled = kind == "scale"
        try:
            return _try(scaled_part(part, factor) if scaled else part, kind, cand_printer, cand_material,
                        orientation, before, blockers, material,
                        same_frame=orientation == settings.orientation and not scaled, factor=factor,
                        deadline=deadline, rules_s_per_work=rules_s_per_work,
                        seen=(i, seen) if kind == "orientation" else None,
                        turned_from=stack if kind == "orientation" and {orientation, settings.orientation} == {"+z", "-z"}
                        else None)
        except _OutOfTime:
            stopped.add(i)
            return None  # not finished within the budget: not shown
        finally:
            seen.end(i)  # said already where its layers were kept; here for every other way out

    results = _tried_side_by_side(attempt, candidates, deadline, progress, at_once)
    # A twin of a turn left unfinished is unfinished too: it was never judged on its own.
    stopped |= {i for i, r in enumerate(results) if isinstance(r, _Twin) and r.of in stopped}
    results = _merge_twins(results)
    if unfinished is not None:
        unfinished.extend(change_sentence(kind, p, m, o, factor=factor, freq_ghz=_design_freq_ghz(part))
                          for i, (kind, p, m, o) in enumerate(candidates) if i in stopped or i >= len(results))
    tried = [a for a in results if a is not None]
    better = [a for a in tried if a.blockers < len(blockers) or a.blockers_removed]
    better.sort(key=lambda a: (a.blockers, a.cautions, a.kind != "orientation", a.cost_one or 0.0))
    return better[:SHOWN]


def _tried_side_by_side(attempt: Callable, candidates: list, deadline: float,
                        progress: Callable[[float], None] | None, at_once: int) -> list[Alternative | None]:
    """Return ``attempt(i, c)`` for the candidates in order, ``at_once`` at a time (slicing and rules release the GIL
    in their numpy and OpenCV loops), starting no new one after ``deadline`` (monotonic): the list stops at the
    first candidate never started. Progress stays here."""
    results: dict[int, Alternative | None] = {}
    at_once = max(1, at_once)
    with ThreadPoolExecutor(max_workers=at_once, thread_name_prefix="phasewright-change") as pool:
        running, queued = {}, list(enumerate(candidates))
        while queued or running:
            while queued and len(running) < at_once and time.monotonic() <= deadline:
                i, candidate = queued.pop(0)
                running[pool.submit(attempt, i, candidate)] = i
            if not running:
                break  # the budget is spent
            done, _ = wait(running, return_when=FIRST_COMPLETED)
            for future in done:
                results[running.pop(future)] = future.result()
            if progress:
                progress(len(results) / len(candidates))
    return [results[i] for i in sorted(results)]


WIDTH_RULES = ("min_feature", "min_gap", "min_hole")
MAX_SCALE = 3.0  # beyond this a scaled part is a new design, not a fix


def scale_to_clear(blockers: Sequence[Finding]) -> float | None:
    """Return the uniform scale that brings every too-narrow width blocker up to its limit (2 % over, rounded up to
    the hundredth), or None when another kind of blocker stands or the scale would pass ``MAX_SCALE``."""
    widths = [f for f in blockers if f.rule in WIDTH_RULES and f.measured and f.limit]
    if not widths or len(widths) != len(blockers):
        return None
    factor = max(f.limit / f.measured for f in widths) * 1.02
    factor = np.ceil(factor * 100) / 100
    return float(factor) if 1.0 < factor <= MAX_SCALE else None


def scaled_part(part: Part, factor: float) -> Part:
    """Return the part with every size times ``factor`` about its lowest corner (still on the plate)."""
    lo = part.bounds_mm[0]
    return replace(part, vertices_mm=(np.asarray(part.vertices_mm, dtype=np.float64) - lo) * factor + lo,
                   volume_mm3=part.volume_mm3 * factor ** 3)


def _candidates(printer, material, orientation, catalogue):
    """Return (kind, printer, material, orientation) to try, the cheapest and least disruptive first."""
    out = [("orientation", printer, material, turn) for turn in TURNS.get(orientation, ("+z",))]
    # The design rules depend on the printer, not the material: another material on the same printer changes none.
    out += [(kind, p, m, orientation) for kind, p, m in other_pairings(printer, material, catalogue) if kind != "material"]
    return out


KINDS = ("material", "printer", "printer_and_material")


def other_pairings(printer, material, catalogue):
    """Return the lab's (kind, printer, material) pairings other than the part's own that the printer can print,
    once each, least disruptive first: another material on the same printer, the same material on another
    printer, then both changed (which changes the optics too)."""
    out, seen = [], {(printer.slug, material.slug)}
    for other_printer, other_material in catalogue:
        key = (other_printer.slug, other_material.slug)
        if key in seen:
            continue
        try:
            check_pairing(other_printer, other_material)
        except UnusableInput:
            continue
        seen.add(key)
        kind = ("material" if other_printer.slug == printer.slug else
                "printer" if other_material.slug == material.slug else "printer_and_material")
        out.append((kind, other_printer, other_material))
    return sorted(out, key=lambda c: KINDS.index(c[0]))


def change_sentence(kind: str, printer, material, orientation: str | None = None, factor: float | None = None,
                    freq_ghz: float | None = None) -> str:
    """Return the change tried, in words: "print it on Bay 3 laser resin printer in the same material"."""
    if kind == "scale":
        # A dielectric part scaled by s behaves at f / s as it did at f (Maxwell's equations scale; dispersion aside).
        design = f", the same design for {freq_ghz / factor:.4g} GHz instead of {freq_ghz:g} GHz" if freq_ghz else ""
        return f"scale the whole part by {factor:.2f}{design}"
    if kind == "orientation":
        return f"build it along {orientation} on the same printer"
    if kind == "material":
        return f"print it in {material.name} on the same printer"
    if kind == "printer":
        return f"print it on {printer.name} in the same material"
    return f"print it on {printer.name} in {material.name}"


def _design_freq_ghz(part: Part) -> float | None:
    """Return the frequency a generated part was designed for (None for an uploaded mesh)."""
    freq = (part.parameters or {}).get("freq_ghz")
    return float(freq) if isinstance(freq, int | float) else None


def _one_material_per_printer(candidates):
    """Keep one material per other printer (the design rules depend on the printer, not the material)."""
    kept, seen = [], set()
    for kind, printer, material, orientation in candidates:
        key = (printer.slug, orientation)
        if kind == "printer_and_material" and key in seen:
            continue
        seen.add(key)
        kept.append((kind, printer, material, orientation))
    return kept


def lost_features(stack, blockers: Sequence[Finding]) -> list[Finding]:
    """Return the located blockers whose place holds no solid in this stack: a coarser grid dropped the feature.

    A printer whose pixel is wider than a thin fin does not print the fin at all; its rules then find nothing
    there, which is not a fix. The blocker's location is looked for in a 3 x 3 pixel window of its layer.
    """
    lost = []
    ox, oy, oz = stack.origin_mm
    for f in blockers:
        if f.location_mm is None:
            continue
        x, y, z = f.location_mm
        k = int((z - oz) // stack.layer_height_mm)
        r, c = int((y - oy) // stack.pixel_mm), int((x - ox) // stack.pixel_mm)
        if not 0 <= k < stack.count:
            lost.append(f)
            continue
        layer = stack.layer(k)
        window = layer[max(r - 1, 0):r + 2, max(c - 1, 0):c + 2]
        if window.size == 0 or not window.any():
            lost.append(f)
    return lost


_UNCHANGED = object()  # a turn whose layers are the part's own, turned in the plane: nothing to check again


@dataclass(frozen=True, slots=True)
class _Twin:
    """A tried turn whose layers are an earlier turn's (``of``, its index among the candidates), turned in the
    plane as ``turn`` says: it takes that turn's result, whatever it is (no rules run on it)."""

    of: int
    orientation: str
    turn: str


class _SameLayers:
    """The layer stacks of the turns tried so far, so that a turn whose layers were already checked (the part's
    own, or an earlier turn's, turned or mirrored in the plane: ``layers.same_layers_turned``) is not checked
    again. A twin does not wait for the turn it repeats to end (``_merge_twins`` joins them once all have
    ended), only for each earlier turn to have its layers kept (``keep``) or to end: two turns sliced side by side
    (a wide lens on +x and +y) would otherwise each miss the other. The earlier never waits for a later one."""

    def __init__(self, own: layers.LayerStack | None, turns: dict[int, tuple[float, float, float]]) -> None:
        """``turns``: each turn's index among the candidates and its extent once turned (x, y, z). A later turn
        waits only for earlier ones of its height and widths (the others cannot have its layers), each until
        ``end``: changes start in order, so an earlier turn has always started when a later one asks, and ends
        in every way out."""
        self._own = own
        self._known = threading.Condition()
        self._stacks: dict[int, layers.LayerStack] = {}
        self._slicing: set[int] = set(turns)
        self._shape = {i: (z, sorted((x, y))) for i, (x, y, z) in turns.items()}

    def end(self, i: int) -> None:
        """Say that turn ``i`` has its layers, or will never have them (it did not fit, ran out of time, failed)."""
        with self._known:
            self._slicing.discard(i)
            self._known.notify_all()

    def known(self, i: int, stack: layers.LayerStack) -> object:
        """Return ``_UNCHANGED`` (the part's own layers), (earlier turn, how its layers are turned to these), or
        None for layers not seen before, once every earlier turn has its layers kept or has ended."""
        if self._own is not None and layers.same_layers_turned(self._own, stack):
            return _UNCHANGED
        with self._known:
            self._known.wait_for(lambda: not any(j < i and self._shape[j] == self._shape[i] for j in self._slicing))
            earlier = sorted((j, s) for j, s in self._stacks.items() if j < i)
        for j, other in earlier:
            turn = layers.same_layers_turned(other, stack)
            if turn:
                return j, turn
        return None

    def keep(self, i: int, stack: layers.LayerStack) -> None:
        """Keep turn ``i``'s layers for the later turns of its height and widths (only layers not seen before, and
        only a turn whose rules will run: one projected past the budget is never kept, so no later turn spends a
        comparison on it); none later: nothing is held."""
        with self._known:
            if any(j > i and shape == self._shape[i] for j, shape in self._shape.items()):
                self._stacks[i] = stack
        self.end(i)


def _merge_twins(results: list) -> list[Alternative | None]:
    """Fold each ``_Twin`` into the turn it repeats: that turn's change names both (the twin is not shown apart)."""
    merged = list(results)
    for i, twin in enumerate(results):
        if not isinstance(twin, _Twin):
            continue
        merged[i] = None
        first = merged[twin.of]
        if isinstance(first, Alternative):
            also = (*first.also_orientations, twin.orientation)
            said = f"along {twin.orientation} it prints the same layers, {twin.turn} (checked once)"
            merged[twin.of] = replace(first, also_orientations=also, note="; ".join(filter(None, (first.note, said))),
                                      change=f"build it along {' or '.join((first.orientation, *also))} on the same "
                                             "printer")
    return merged


class _OutOfTime(Exception):
    """Raised from a tried change's progress once the search's budget is spent, or once its pace shows it will be."""


# A stage's pace is read once it is this far along and has run this long (before, the first layers say too little),
# and it is stopped when what is left of it alone, at its pace so far, would need this many times the time left.
PACE_FROM_FRACTION, PACE_FROM_S, PACE_MARGIN = 0.05, 1.0, 1.5


def _paced(deadline: float | None) -> Callable[[float], None]:
    """Return a progress callback for one stage of a tried change that raises ``_OutOfTime`` past the deadline,
    or earlier when the stage's own pace says it cannot end by then.

    The stage's remaining work is projected from its pace so far (its fraction done over the time it took); the
    stages after it only add to that, so the projection is a lower bound of what the change still needs. The
    margin covers stages whose work is unevenly spread (a lens's middle layers are its widest). A change that
    could not be shown anyway stops early and leaves the cores to the changes that can.
    """
    if deadline is None:
        return lambda _fraction: None
    start = time.monotonic()

    def report(fraction: float) -> None:
        now = time.monotonic()
        if now > deadline:
            raise _OutOfTime
        spent = now - start
        if fraction >= PACE_FROM_FRACTION and spent >= PACE_FROM_S:
            if spent * (1.0 - fraction) / fraction > PACE_MARGIN * (deadline - now):
                raise _OutOfTime
    return report


def _projected_in_time(stack, rules_s_per_work: float | None, deadline: float | None) -> None:
    """Raise ``_OutOfTime`` when the rules on this stack, projected at the part's own rules pace, would need more
    than PACE_MARGIN times the time the budget has left (the projection counts each run's window and fixed cost,
    so a tall stack of small layers, such as a lens on its edge, is judged before its first layer is checked)."""
    if deadline is None or not rules_s_per_work:
        return
    if rules_s_per_work * scan.pass_work(stack) > PACE_MARGIN * (deadline - time.monotonic()):
        raise _OutOfTime


def _try(part, kind, printer, material, orientation, before, blockers, own_material, *, same_frame: bool,
         factor: float | None = None, deadline: float | None = None, rules_s_per_work: float | None = None,
         seen: tuple[int, _SameLayers] | None = None,
         turned_from: layers.LayerStack | None = None) -> Alternative | _Twin | None:
    """Return what the check finds after the change, or None when the part still does not fit the printer
    (nothing else about it matters then; the build-fit check is cheap, the slicing and rules are not) or when
    ``seen`` (this turn's index among the candidates, and the turns' layers so far) knows its layers as the
    part's own; a ``_Twin`` when it knows them as another turn's. ``turned_from``, the part's own stack when this
    change turns it over: its layers are read from it where that is exact (``layers.turned_over``), not sliced."""
    from services.estimate import estimate_print

    oriented = layers.orient_part(part, orientation)
    fit, _ = check_build_fit(oriented, printer)
    if any(f.severity == "blocker" for f in fit):
        return None
    stack = layers.turned_over(turned_from, oriented) if turned_from is not None else None
    if stack is None:
        stack = layers.build_layer_stack(oriented, pixel_mm=printer.pixel_mm,
                                         layer_height_mm=printer.layer_height_mm, progress=_paced(deadline))
    if seen is not None:
        known = seen[1].known(seen[0], stack)
        if known is _UNCHANGED:
            return None
        if known is not None:
            return _Twin(known[0], orientation, known[1])
    _projected_in_time(stack, rules_s_per_work, deadline)
    if seen is not None:
        seen[1].keep(seen[0], stack)
    rules = run_rules(stack=stack, part=oriented, printer=printer, progress=_paced(deadline))
    # A feature the printer's grid drops is not fixed: its blocker stands (same orientation, same frame).
    lost = lost_features(stack, blockers) if same_frame else []
    found = [*fit, *rules.findings, *lost]
    after = {f.rule for f in found if f.severity == "blocker"}
    try:
        support = rules.summary.get("overhang", {}).get("support_volume_mm3")
        estimate = estimate_print(stack=stack, part=oriented, printer=printer, material=material,
                                  quantities=(1,), support_volume_mm3=support).to_dict()
    except UnusableInput:
        estimate = {}
    cost = estimate.get("cost") or {}
    change = change_sentence(kind, printer, material, orientation, factor=factor, freq_ghz=_design_freq_ghz(part))
    notes = []
    if kind == "scale":
        notes.append("a scaled optic works at another frequency: check the scaled design before printing")
    if lost:
        notes.append(f"its grid drops {len(lost)} feature{'s' if len(lost) != 1 else ''} the design has")
    if material.slug != own_material.slug:
        notes.append("a different material changes the optics: check the part again in it before printing")
    note = "; ".join(notes) or None
    return Alternative(change=change, kind=kind, printer=printer.slug, material=material.slug, orientation=orientation,
                       blockers=sum(f.severity == "blocker" for f in found),
                       cautions=sum(f.severity == "caution" for f in found),
                       blockers_removed=tuple(sorted(before - after)), print_time_s=estimate.get("print_time_s"),
                       cost_one=cost.get("total"), currency=cost.get("currency"), note=note,
                       scale=factor if kind == "scale" else None)

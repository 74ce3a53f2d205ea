"""The optics section of a report: transmission, focus, as designed vs as printed, tolerance, rules."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from services.findings import Finding
from services.layers import LayerStack
from services.optics import checks, figures, grids, grooves
from services.optics.cell_model import cell_index_for
from services.optics.cells import CellGrid, cell_coverage
from services.optics.effective_medium import DEFAULT_MODEL
from services.optics.gaussian import confocal_distance_mm
from services.optics.evaluate import (EFFICIENCY_RADIUS_FWHM, Losses, design_plane_ratio, focus_dict, focus_metrics,
                                      losses, surface_depth_mm)
from services.optics.illumination import Illumination, illumination_for
from services.optics.materials import RULE_SENTENCE, RFValues, design_freqs_ghz, rf_values, wavelength_mm
from services.optics.multislice import Beam
from services.optics.plan import Plan, frequency_plans
from services.optics.vortex import SpiralPlate, mode_spectrum, spiral_plate, vortex_dict, vortex_metrics
from services.optics.touchstone import touchstone_s2p
from services.optics.transmission import CellSParams, Variant, cell_sparams
from services.part import Part
from services.profiles import Material, PrinterProfile
from services.settings import OpticsSettings

DISTANCES_FROM = ("the part's far extreme along the optical axis (its highest point in +z as built, "
                  "e.g. a lens vertex); the optical axis is build +z through the centre of the part's xy bounds")
FOCUS_DEFINITIONS = {
    "best_focus_mm": "the on-axis intensity peak; at a low Fresnel number a^2 / (lambda f) it lies short of the "
                     "geometric focus (Li & Wolf, Opt. Commun. 39, 211, 1981)",
    "wavefront_focus_mm": "the centre of the converging sphere that best fits the wavefront leaving the part "
                          "(amplitude-weighted phase coherence): the geometric focus a design focal length means",
    "strehl": "peak intensity over that of the ideal converging wave from the part's exit surface: the exit field "
              "taken back through air to where the exit surface starts (a lens's rim), cut to the clear aperture "
              "at the same power, with a perfect spherical wavefront converging on the wavefront focus (1 for an "
              "aberration-free part, within 0.01 from Fresnel number 10 up)",
    "design_plane_fwhm_ratio": "the spot's FWHM in the plane at the intended focal length (where the detector sits), "
                               "over the diffraction-limited FWHM",
    "ideal_peak_mm": "where the Strehl ratio's ideal wave peaks on the axis; an on-axis peak well short of it (a "
                     "bright near field of a part that barely focuses) reads a Strehl ratio above 1 that compares two "
                     "distances (the focus note)",
}
EFFICIENCY_DEFINITION = (f"power inside a circle of radius {EFFICIENCY_RADIUS_FWHM:g} x the diffraction-limited FWHM "
                         "around the focal-plane peak, over the illumination power incident on the clear aperture "
                         "(after Arbabi et al., Nat. Commun. 6, 7069, 2015; from memory)")


@dataclass(frozen=True, slots=True, eq=False)
class OpticsResult:
    """The optics section (``to_dict``), its findings, its PNG figures and a Touchstone .s2p text."""

    section: dict
    findings: list[Finding] = field(default_factory=list)
    figures: dict[str, bytes] = field(default_factory=dict)
    touchstone: str | None = None

    def to_dict(self) -> dict:
        return self.section


@dataclass(frozen=True, slots=True, eq=False)
class _Model:
    """One evaluated model of the part: per-cell S-parameters (None once merged over passes), weighted losses,
    focus per frequency."""

    sparams: CellSParams | None
    losses: object
    focus: list | None
    vortex: list | None = None   # a spiral's vortex per frequency (the nominal print and the design)
    purity: list | None = None   # a spiral's mode purity per frequency (every model, the tolerance variants too)


@dataclass(frozen=True, slots=True, eq=False)
class _Pass:
    """One plan's results: the illumination on its grid, the printed models, the design and the phase error."""

    plan: Plan
    illum: Illumination
    models: dict[str, _Model]
    design: _Model
    err: checks.PhaseError


def optics_report(*, part: Part, printed: LayerStack, material: Material, printer: PrinterProfile,
                  settings: OpticsSettings, progress: Callable[[float], None] | None = None,
                  with_figures: bool = True) -> OpticsResult:
    """Return what the printed part and its design do to the beam at the design frequencies (``with_figures``:
    draw the PNG figures too; a what-if run for another printer or material needs only the numbers)."""
    tick = progress or (lambda fraction: None)
    freqs, freq_note = design_freqs_ghz(material, settings.freqs_ghz)
    rf = rf_values(material, freqs)
    period = _period_mm(rf, part, printed)
    plans = frequency_plans(part=part, printer=printer, printed=printed, rf=rf,
                            period_mm=period[0] if period else None, clear_aperture_mm=settings.clear_aperture_mm,
                            lattice=_declared_lattice(part, period), progress=lambda f: tick(0.25 * f))
    first = plans[0]
    if not (cell_coverage(first.zone.mask, first.designed, first.grid) >= 0.5).any():
        return _not_computed(part, first.grid, freq_note)
    mid = len(rf.freqs_ghz) // 2
    plate = spiral_plate(part.parameters, plans[0].designed, grids.part_axis_mm(part), plans[0].zone.rim_radius_mm,
                         (np.sqrt(rf.eps_r[mid]) - 1) / float(wavelength_mm(rf.freqs_ghz[mid])))
    # Periodic subwavelength cells declared by the generator get a rigorous table (built once for all frequencies).
    cells, cells_why = cell_index_for(part, rf, period, progress=lambda f: tick(0.25 * f))
    passes = []
    for k, plan in enumerate(plans):
        share = 0.65 / len(plans)
        passes.append(_run(plan, part, printed, printer, rf, settings, plate, cells.rows(plan.index),
                           lambda f: tick(0.25 + share * (k + f))))
    tick(0.9)
    order = np.argsort(np.concatenate([p.plan.index for p in passes]), kind="stable")
    models = {name: _merged([p.models[name] for p in passes], order) for name in passes[0].models}
    design_model = _merged([p.design for p in passes], order)
    err = checks.PhaseError(*(np.concatenate([getattr(p.err, f) for p in passes])[order] for f in ("rms_rad", "strehl")))
    findings = _findings(err, rf, period, settings, models["nominal"].focus)
    section = _section(rf, freq_note, models, design_model, passes, err, printer, settings, plate)
    section["analysis"]["lattice_period_mm"] = None if period is None else {"value": period[0], "how": period[1]}
    section["analysis"]["cell_model"] = {**cells.to_dict(), "why": cells_why}
    if grooves.declared_grooves(part.parameters):
        whole = grooves.whole_window(part.parameters, rf, section["as_designed"])
        section["analysis"]["grooves_whole_window"] = whole
        sentence = grooves.note_sentence(part.name, whole, rf.freqs_ghz)
        if sentence:
            findings.append(Finding(rule="cell_model", severity="note", message=sentence))
    result = OpticsResult(section, findings, _figures(rf, models["nominal"], design_model, passes) if with_figures else {},
                          touchstone_s2p(rf.freqs_ghz, *_weighted_s(models["nominal"]), name=part.name))
    tick(1.0)
    return result


def _run(plan: Plan, part: Part, printed: LayerStack, printer: PrinterProfile, rf_all: RFValues,
         settings: OpticsSettings, plate: SpiralPlate | None, cells, tick: Callable[[float], None]) -> _Pass:
    """Return one plan's models: the design and the print with its tolerance variants, on the plan's grids."""
    rf, grid, designed, zone = plan.subset(rf_all), plan.grid, plan.designed, plan.zone
    illum = illumination_for(edge_taper_db=settings.edge_taper_db, beam_waist_mm=settings.beam_waist_mm,
                             rim_radius_mm=zone.rim_radius_mm, grid=grid,
                             aperture=cell_coverage(zone.mask, designed, grid))
    beam = _beam(illum, plan) if settings.focal_length_mm is not None or plate is not None else None
    sp_p = cell_sparams(printed, grid, rf, variants=_tolerance_variants(printer, printed), beam=beam, cells=cells,
                        progress=lambda f: tick(0.6 * f))
    # On the printer's own raster (plan.frequency_plans) the design is the nominal print: no second pass.
    sp_d = sp_p["nominal"] if designed is printed else \
        cell_sparams(designed, grid, rf, beam=beam, cells=cells, progress=lambda f: tick(0.6 + 0.3 * f))["nominal"]
    z_ref = float(part.bounds_mm[1][2])
    models = {name: _evaluate(sp, illum, rf, settings, z_ref, grid.axis_index, plate, name == "nominal")
              for name, sp in sp_p.items()}
    # The print serving as the design is the same model: its focus is not searched for twice.
    design = models["nominal"] if sp_d is sp_p["nominal"] else _evaluate(sp_d, illum, rf, settings, z_ref,
                                                                          grid.axis_index, plate, True)
    return _Pass(plan, illum, models, design, checks.phase_error(sp_p["nominal"].s21, sp_d.s21, illum.weights))


def _merged(models: list[_Model], order: np.ndarray) -> _Model:
    """Return one model over all frequencies from the passes' models (S-parameters stay with the passes)."""
    def joined(name):
        return np.concatenate([getattr(m.losses, name) for m in models])[order]

    losses = Losses(*(joined(name) for name in ("transmission", "reflection", "s11", "s21", "s22")))
    focus = None if models[0].focus is None else [f for m in models for f in m.focus]
    vortex = None if models[0].vortex is None else [v for m in models for v in m.vortex]
    purity = None if models[0].purity is None else [v for m in models for v in m.purity]
    return _Model(None, losses, None if focus is None else [focus[i] for i in order],
                  None if vortex is None else [vortex[i] for i in order],
                  None if purity is None else [purity[i] for i in order])


def _not_computed(part: Part, grid: CellGrid, freq_note: str | None) -> OpticsResult:
    """Return an optics section that says why nothing was computed: no analysis cell is half covered by the part.

    Every loss and focus figure is weighted by the illumination on the clear aperture; with none, the
    weights are 0 / 0, so there is nothing honest to report.
    """
    reason = (f"no {grid.cell_mm:.3g} mm analysis cell is at least half covered by the part's footprint (a part "
              "of scattered features smaller than the cells has no clear aperture for the beam)")
    message = (f"{part.name}: the optics were not computed: {reason}; check the units, or join the features into "
               "one part.")
    return OpticsResult({"not_computed": reason, "frequency_note": freq_note},
                        [Finding(rule="not_computed", severity="note", message=message)])


def _beam(illum: Illumination, plan: Plan) -> Beam:
    """Return the illumination on the part's bottom face, on sub-cells, cut to the clear aperture."""
    fine = plan.grid.subdivided(plan.sub)
    inside = cell_coverage(plan.zone.mask, plan.designed, fine) >= 0.5
    return Beam(illum.amplitude_on(fine) * inside, plan.grid, plan.sub, plan.slice_mm, plan.pad_mm,
                None if plan.zone.how == "outline" else inside)


def _tolerance_variants(printer: PrinterProfile, printed: LayerStack) -> tuple[Variant, ...]:
    """Return the nominal print and the print grown, shrunk (XY) and stretched, squashed (Z) by the tolerances."""
    height = printed.count * printed.layer_height_mm
    z = printer.z_accuracy_mm / height
    xy = printer.xy_accuracy_mm
    return (Variant("nominal"), Variant("xy_grown", grow_mm=xy), Variant("xy_shrunk", grow_mm=-xy),
            Variant("z_stretched", z_scale=1 + z), Variant("z_squashed", z_scale=max(1 - z, 0.01)))


def _evaluate(sp: CellSParams, illum: Illumination, rf: RFValues, settings: OpticsSettings, z_ref: float,
              axis_index: tuple[int, int], plate: SpiralPlate | None, vortex: bool) -> _Model:
    """Return the model's losses and its focus, or for a spiral plate its vortex (``vortex``: measure it here)."""
    if plate is not None:
        # The nominal print and the design get the whole vortex (its purity among it); a tolerance variant its purity.
        metrics = _vortex(sp, illum, rf, settings, axis_index, plate) if vortex else None
        purity = [m.purity for m in metrics] if metrics is not None else \
            [mode_spectrum(field, illum.cell_mm, axis_index).get(plate.charge, 0.0) for field in sp.exit_field]
        return _Model(sp, losses(sp, illum), None, metrics, purity)
    focus = None
    if settings.focal_length_mm is not None:
        depth = surface_depth_mm(sp, illum)
        focus = [focus_metrics(sp.exit_field[i], illum, wavelength_mm=float(wavelength_mm(f)),
                               intended_mm=settings.focal_length_mm, exit_offset_mm=sp.top_mm - z_ref,
                               axis_index=axis_index, reference_depth_mm=depth) for i, f in enumerate(rf.freqs_ghz)]
    return _Model(sp, losses(sp, illum), focus)


def _vortex(sp: CellSParams, illum: Illumination, rf: RFValues, settings: OpticsSettings,
            axis_index: tuple[int, int], plate: SpiralPlate) -> list:
    """Return each frequency's vortex: the ring at the focal length given, else at the beam's Rayleigh distance."""
    out = []
    for i, f in enumerate(rf.freqs_ghz):
        lam = float(wavelength_mm(f))
        distance = settings.focal_length_mm or float(confocal_distance_mm(illum.beam_radius_mm, lam))
        out.append(vortex_metrics(sp.exit_field[i], cell_mm=illum.cell_mm, axis_index=axis_index, wavelength_mm=lam,
                                  charge=plate.charge, distance_mm=distance))
    return out


def _weighted_s(model: _Model):
    return model.losses.s11, model.losses.s21, model.losses.s22


def _findings(err: checks.PhaseError, rf: RFValues, period: tuple[float, str] | None,
              settings: OpticsSettings, focus: list | None) -> list[Finding]:
    found = [checks.phase_error_finding(err, rf.freqs_ghz, settings.phase_error_blocker_strehl)]
    if focus is not None:
        read = (np.array([getattr(m, key) for m in focus])
                for key in ("strehl", "best_focus_mm", "wavefront_focus_mm", "ideal_peak_mm"))
        found.append(checks.strehl_above_one_finding(rf.freqs_ghz, *read))
    if period is not None:
        i = int(np.argmax(rf.freqs_ghz))
        # Normal incidence: the Gaussian beam has its waist (a flat phase front) on the input face.
        found.append(checks.period_finding(period[0], period[1], float(wavelength_mm(rf.freqs_ghz[i])),
                                           float(np.sqrt(rf.eps_r[i])), float(rf.freqs_ghz[i])))
    if rf.outside.any():
        lo, hi = rf.table_range_ghz
        out = "; ".join(f"{f:g} GHz: eps_r {e:.3f}, tan delta {t:.2g}" for f, e, t
                        in zip(rf.freqs_ghz[rf.outside], rf.eps_r[rf.outside], rf.tan_delta[rf.outside]))
        found.append(Finding(rule="rf_table", severity="caution", unit="GHz",
                             measured=float(rf.freqs_ghz[rf.outside][0]),
                             message=(f"Outside the material's RF data ({lo:g}-{hi:g} GHz) the values are "
                                      f"extrapolated ({out}): {RULE_SENTENCE}. eps_r is held at the nearest "
                                      "data point and tan delta continues the end segment's power law; "
                                      "measure the material to be sure.")))
    return [f for f in found if f is not None]


def _declared_lattice(part: Part, period: tuple[float, str] | None) -> str | None:
    """Return the lattice the generator declared with its period ("square", "hex"), else None."""
    return (part.parameters or {}).get("lattice") if period is not None and period[1] == "declared" else None


def _period_mm(rf: RFValues, part: Part, printed: LayerStack) -> tuple[float, str] | None:
    """Return (period, "declared" | "detected"): part.parameters['period_mm'], else the busiest layer's lattice."""
    declared = (part.parameters or {}).get("period_mm")
    if declared is not None:
        return float(declared), "declared"
    busiest = int(np.argmax(printed.perimeter_mm))
    lam_max = float(wavelength_mm(rf.freqs_ghz.min()))
    # Only structure below about a wavelength is meant as an effective medium; a coarse grating is not.
    period = checks.detect_period_mm(printed.layer(busiest), printed.pixel_mm, 1.5 * lam_max)
    return (period, "detected") if period is not None else None


def _phase_error_caveat(passes: list[_Pass], printer: PrinterProfile) -> str:
    """Return what the phase error means where a pass took the print as its design, else nothing."""
    own = [p for p in passes if (p.plan.dgrid.pixel_mm, p.plan.dgrid.layer_height_mm)
           == (printer.pixel_mm, printer.layer_height_mm)]
    if not own:
        return ""
    freqs = "every frequency" if len(own) == len(passes) else "some frequencies"
    return (f"; at {freqs} the printer's own grid already meets the as-designed raster's rule (see as_designed_grid "
            "in analysis.passes), so the print serves as the design and this reads 0 rad: its pixel and layer "
            "staircase costs less than the rule's stated bound (phase-error Strehl within 0.01 of 1), not measured here")


def _section(rf, freq_note, models, design, passes, err, printer, settings, plate) -> dict:
    spill = _spillover_db(rf, passes)
    printed = models["nominal"]
    focal = settings.focal_length_mm
    top = passes[-1]  # the highest frequency's pass, whose cells are the finest

    def focus_of(model):
        return focus_dict(focal, model.focus) if model.focus is not None else None

    return {
        "frequencies_ghz": [float(f) for f in rf.freqs_ghz],
        "frequency_note": freq_note,
        "eps_r": [round(float(v), 5) for v in rf.eps_r],
        "tan_delta": [float(f"{v:.5g}") for v in rf.tan_delta],
        "outside_rf_table": [bool(v) for v in rf.outside],
        "rf_table_range_ghz": list(rf.table_range_ghz),
        **printed.losses.to_dict(spill),
        "illumination": _pass_of(passes, len(rf.freqs_ghz) // 2, rf).illum.to_dict(),
        "clear_aperture": top.plan.zone.to_dict(),
        "focus": focus_of(printed),
        "vortex": None if plate is None else vortex_dict(plate, design.vortex, printed.vortex),
        "as_designed": {**design.losses.to_dict(spill), "focus": focus_of(design)},
        "distances_from": DISTANCES_FROM,
        "focusing_efficiency_definition": EFFICIENCY_DEFINITION,
        "focus_definitions": FOCUS_DEFINITIONS,
        "phase_error": {"rms_rad": [round(float(v), 5) for v in err.rms_rad],
                        "strehl": [round(float(v), 5) for v in err.strehl],
                        "method": "illumination-weighted RMS of arg(t_printed / t_designed), piston removed; "
                                  "Strehl exp(-sigma^2) (Marechal)" + _phase_error_caveat(passes, printer)},
        "tolerance": _band(models, printer),
        "analysis": {
            "cell_mm": top.plan.grid.cell_mm, "cells": list(top.plan.grid.shape),
            "cells_per_wavelength": round(float(wavelength_mm(rf.freqs_ghz.max()) / top.plan.grid.cell_mm), 3),
            "effective_medium": DEFAULT_MODEL, "as_designed_grid": top.plan.dgrid.to_dict(),
            "multislice": None if focal is None else {"sub_cell_mm": top.plan.grid.cell_mm / top.plan.sub,
                                                      "longest_slice_mm": top.plan.slice_mm,
                                                      "absorbing_margin_mm": top.plan.pad_mm},
            "passes": [p.plan.to_dict(rf) for p in passes],
            "grids_rule": ("each frequency runs on the grids its own wavelength and index give (cells, sub-cells, "
                           "slices, absorbing margin, as-designed raster), so its numbers do not depend on the "
                           "other frequencies of the run; frequencies with the same grids share a pass"),
            "model": ("losses: per-cell coherent transfer matrix along the axis (normal incidence); focus: "
                      "the illumination marched up through the part slice by slice (scalar split-step "
                      "beam propagation on sub-cells, loss from Im n, the faces' transmission from the "
                      "transfer matrices), then scalar angular-spectrum propagation from the part's top"),
        },
    }


def _pass_of(passes: list[_Pass], i: int, rf: RFValues) -> _Pass:
    """Return the pass that computed frequency i of the run."""
    return next(p for p in passes if i in p.plan.index)


def _spillover_db(rf: RFValues, passes: list[_Pass]) -> np.ndarray:
    """Return each frequency's spillover loss in dB, from its own pass's illumination."""
    out = np.zeros(len(rf.freqs_ghz))
    for p in passes:
        out[p.plan.index] = -10 * np.log10(max(1 - p.illum.spillover_fraction, 1e-12))
    return out


def _band(models: dict, printer: PrinterProfile) -> dict:
    """Return min and max over the nominal print and its four tolerance variants, and each variant's values."""
    def values(model):
        out = {"transmission_loss_db": -10 * np.log10(model.losses.transmission)}
        if model.focus is not None:
            out["best_focus_mm"] = np.array([m.best_focus_mm for m in model.focus])
            out["wavefront_focus_mm"] = np.array([m.wavefront_focus_mm for m in model.focus])
            out["strehl"] = np.array([m.strehl for m in model.focus])
            out["fwhm_mm"] = np.array([np.mean(m.fwhm_mm) for m in model.focus])
            out["design_plane_fwhm_ratio"] = np.array([design_plane_ratio(m) for m in model.focus])
            out["focusing_efficiency"] = np.array([m.focusing_efficiency for m in model.focus])
        if model.purity is not None:
            out["mode_purity"] = np.array(model.purity)
        return out

    per = {name: values(model) for name, model in models.items()}
    band = {}
    for key in per["nominal"]:
        stack = np.array([v[key] for v in per.values()])
        band[key] = {"min": [round(float(v), 4) for v in stack.min(axis=0)],
                     "max": [round(float(v), 4) for v in stack.max(axis=0)]}
    return {
        "xy_accuracy_mm": printer.xy_accuracy_mm, "z_accuracy_mm": printer.z_accuracy_mm,
        "how": "the print grown and shrunk by the XY accuracy at every boundary, and its height scaled by +-Z accuracy",
        "band": band,
        "variants": {name: {k: [round(float(x), 4) for x in v] for k, v in vals.items()}
                     for name, vals in per.items() if name != "nominal"},
    }


def _figures(rf: RFValues, printed: _Model, design: _Model, passes: list[_Pass]) -> dict[str, bytes]:
    mid = len(rf.freqs_ghz) // 2
    run = _pass_of(passes, mid, rf)
    local = int(np.flatnonzero(run.plan.index == mid)[0])
    grid = run.plan.grid
    # Curves against frequency only where there is more than one: at one frequency the table holds the same
    # numbers, and a column of dots said nothing more (and cost a fifth of the optics' figures' time).
    sweep = len(rf.freqs_ghz) > 1
    out = {
        "optics_phase_map.png": figures.phase_map_png(
            _phase_from_axis(run.models["nominal"].sparams.s21[local], grid.axis_index), run.illum.aperture >= 0.5,
            grid.cell_mm, float(rf.freqs_ghz[mid])),
    }
    if sweep:
        spill = _spillover_db(rf, passes)
        p, d = printed.losses.to_dict(spill), design.losses.to_dict(spill)
        out["optics_loss.png"] = figures.loss_png(rf.freqs_ghz, p["absorption_db"], p["reflection_db"],
                                                  p["spillover_db"], d["transmission_loss_db"])
        if printed.focus is not None:
            out["optics_fwhm.png"] = figures.fwhm_png(rf.freqs_ghz, [m.fwhm_mm for m in printed.focus],
                                                      [m.diffraction_limited_fwhm_mm for m in printed.focus])
    if printed.focus is not None:
        m = printed.focus[mid]
        out["optics_focal_plane.png"] = figures.focal_plane_png(
            np.abs(m.spot.field) ** 2, np.abs(m.ideal.field) ** 2, grid.cell_mm, m.spot.peak_index,
            float(rf.freqs_ghz[mid]), m.best_focus_mm)
    return out


def _phase_from_axis(s21: np.ndarray, axis_index: tuple[int, int]) -> np.ndarray:
    """Return arg(S21) relative to the axis cell, wrapped to [-pi, pi]."""
    return np.angle(s21 * np.conj(s21[axis_index]))

"""The optics section of a report: transmission, focus, as designed vs as printed, tolerance, rules."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from services.findings import Finding
from services.layers import LayerStack, build_layer_stack
from services.optics import checks, figures, grids
from services.optics.cells import CellGrid, cell_footprint
from services.optics.effective_medium import DEFAULT_MODEL
from services.optics.evaluate import EFFICIENCY_RADIUS_FWHM, focus_dict, focus_metrics, losses
from services.optics.illumination import Illumination, illumination_for
from services.optics.materials import RFValues, default_freqs_ghz, rf_values, wavelength_mm
from services.optics.multislice import ABSORBER_WAVELENGTHS, Beam
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
    "strehl": "peak intensity over that of the same exit amplitude with a perfect spherical wavefront converging on "
              "the wavefront focus (1 for an aberration-free part at any Fresnel number)",
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
    """One evaluated model of the part: per-cell S-parameters, weighted losses, focus per frequency."""

    sparams: CellSParams
    losses: object
    focus: list | None


def optics_report(*, part: Part, printed: LayerStack, material: Material, printer: PrinterProfile,
                  settings: OpticsSettings, progress: Callable[[float], None] | None = None) -> OpticsResult:
    """Return what the printed part and its design do to the beam at the design frequencies."""
    tick = progress or (lambda fraction: None)
    freqs, freq_note = _frequencies(settings, material)
    rf = rf_values(material, freqs)
    lam = wavelength_mm(rf.freqs_ghz)
    period = _period_mm(rf, part, printed)
    grid = grids.analysis_grid(part, printer.pixel_mm, float(lam.min()), period[0] if period else None)
    dgrid = grids.design_grid(part, printer_pixel_mm=printer.pixel_mm, printer_layer_mm=printer.layer_height_mm,
                              cell_mm=grid.cell_mm, wavelength_min_mm=float(lam.min()), n_max=grids.max_index(rf.eps_r))
    designed = build_layer_stack(part, pixel_mm=dgrid.pixel_mm, layer_height_mm=dgrid.layer_height_mm,
                                 progress=lambda f: tick(0.25 * f))
    illum = illumination_for(edge_taper_db=settings.edge_taper_db, beam_waist_mm=settings.beam_waist_mm,
                             rim_radius_mm=grids.rim_radius_mm(part), grid=grid,
                             aperture=cell_footprint(designed, grid))
    beam = _beam(illum, designed, grid, printer, rf, period) if settings.focal_length_mm is not None else None
    sp_d = cell_sparams(designed, grid, rf, beam=beam, progress=lambda f: tick(0.25 + 0.2 * f))["nominal"]
    variants = _tolerance_variants(printer, printed)
    sp_p = cell_sparams(printed, grid, rf, variants=variants, beam=beam, progress=lambda f: tick(0.45 + 0.25 * f))
    z_ref = float(part.bounds_mm[1][2])
    models = {name: _evaluate(sp, illum, rf, settings, z_ref, grid.axis_index) for name, sp in sp_p.items()}
    tick(0.9)
    design_model = _evaluate(sp_d, illum, rf, settings, z_ref, grid.axis_index)
    err = checks.phase_error(sp_p["nominal"].s21, sp_d.s21, illum.weights)
    findings = _findings(err, rf, period, settings)
    section = _section(rf, freq_note, models, design_model, illum, grid, dgrid, err, printer, settings)
    section["analysis"]["multislice"] = None if beam is None else {
        "sub_cell_mm": beam.fine.cell_mm, "longest_slice_mm": beam.slice_mm, "absorbing_margin_mm": beam.pad_mm}
    section["analysis"]["lattice_period_mm"] = None if period is None else {"value": period[0], "how": period[1]}
    result = OpticsResult(section, findings, _figures(rf, models["nominal"], design_model, illum, grid),
                          touchstone_s2p(rf.freqs_ghz, *_weighted_s(models["nominal"]), name=part.name))
    tick(1.0)
    return result


def _frequencies(settings: OpticsSettings, material: Material) -> tuple[tuple[float, ...], str | None]:
    if settings.freqs_ghz:
        return tuple(settings.freqs_ghz), None
    freqs = default_freqs_ghz(material)
    return freqs, ("No design frequency was given; using " + ", ".join(f"{f:.4g}" for f in freqs)
                   + " GHz around the centre of the material's RF table.")


def _beam(illum: Illumination, designed: LayerStack, grid: CellGrid, printer: PrinterProfile, rf: RFValues,
          period: tuple[float, str] | None) -> Beam:
    """Return the illumination on the part's bottom face, on sub-cells, cut to the clear aperture."""
    lam = wavelength_mm(rf.freqs_ghz)
    sub = grids.field_subdivision(grid, printer.pixel_mm, float(lam.min()), period[0] if period else None)
    fine = grid.subdivided(sub)
    return Beam(illum.amplitude_on(fine) * cell_footprint(designed, fine), grid, sub,
                grids.slice_mm(float(lam.min()), grids.max_index(rf.eps_r)), ABSORBER_WAVELENGTHS * float(lam.max()))


def _tolerance_variants(printer: PrinterProfile, printed: LayerStack) -> tuple[Variant, ...]:
    """Return the nominal print and the print grown, shrunk (XY) and stretched, squashed (Z) by the tolerances."""
    height = printed.count * printed.layer_height_mm
    z = printer.z_accuracy_mm / height
    xy = printer.xy_accuracy_mm
    return (Variant("nominal"), Variant("xy_grown", grow_mm=xy), Variant("xy_shrunk", grow_mm=-xy),
            Variant("z_stretched", z_scale=1 + z), Variant("z_squashed", z_scale=max(1 - z, 0.01)))


def _evaluate(sp: CellSParams, illum: Illumination, rf: RFValues, settings: OpticsSettings, z_ref: float,
              axis_index: tuple[int, int]) -> _Model:
    focus = None
    if settings.focal_length_mm is not None:
        focus = [focus_metrics(sp.exit_field[i], illum, wavelength_mm=float(wavelength_mm(f)),
                               intended_mm=settings.focal_length_mm, exit_offset_mm=sp.top_mm - z_ref,
                               axis_index=axis_index) for i, f in enumerate(rf.freqs_ghz)]
    return _Model(sp, losses(sp, illum), focus)


def _weighted_s(model: _Model):
    return model.losses.s11, model.losses.s21, model.losses.s22


def _findings(err: checks.PhaseError, rf: RFValues, period: tuple[float, str] | None,
              settings: OpticsSettings) -> list[Finding]:
    found = [checks.phase_error_finding(err, rf.freqs_ghz, settings.phase_error_blocker_strehl)]
    if period is not None:
        i = int(np.argmax(rf.freqs_ghz))
        # Normal incidence: the Gaussian beam has its waist (a flat phase front) on the input face.
        found.append(checks.period_finding(period[0], period[1], float(wavelength_mm(rf.freqs_ghz[i])),
                                           float(np.sqrt(rf.eps_r[i])), float(rf.freqs_ghz[i])))
    if rf.outside.any():
        lo, hi = rf.table_range_ghz
        out = ", ".join(f"{f:g}" for f in rf.freqs_ghz[rf.outside])
        found.append(Finding(rule="rf_table", severity="caution", unit="GHz",
                             measured=float(rf.freqs_ghz[rf.outside][0]),
                             message=(f"{out} GHz lies outside the material's RF data ({lo:g}-{hi:g} GHz); the nearest "
                                      "table values were used, so loss may be underestimated. Add measured data.")))
    return [f for f in found if f is not None]


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


def _section(rf, freq_note, models, design, illum, grid, dgrid, err, printer, settings) -> dict:
    spill_db = float(-10 * np.log10(max(1 - illum.spillover_fraction, 1e-12)))
    printed = models["nominal"]
    focal = settings.focal_length_mm

    def focus_of(model):
        return focus_dict(focal, model.focus) if model.focus is not None else None

    return {
        "frequencies_ghz": [float(f) for f in rf.freqs_ghz],
        "frequency_note": freq_note,
        "eps_r": [round(float(v), 5) for v in rf.eps_r],
        "tan_delta": [float(f"{v:.5g}") for v in rf.tan_delta],
        "outside_rf_table": [bool(v) for v in rf.outside],
        "rf_table_range_ghz": list(rf.table_range_ghz),
        **printed.losses.to_dict(spill_db),
        "illumination": illum.to_dict(),
        "focus": focus_of(printed),
        "as_designed": {**design.losses.to_dict(spill_db), "focus": focus_of(design)},
        "distances_from": DISTANCES_FROM,
        "focusing_efficiency_definition": EFFICIENCY_DEFINITION,
        "focus_definitions": FOCUS_DEFINITIONS,
        "phase_error": {"rms_rad": [round(float(v), 5) for v in err.rms_rad],
                        "strehl": [round(float(v), 5) for v in err.strehl],
                        "method": "illumination-weighted RMS of arg(t_printed / t_designed), piston removed; "
                                  "Strehl exp(-sigma^2) (Marechal)"},
        "tolerance": _band(models, printer),
        "analysis": {
            "cell_mm": grid.cell_mm, "cells": list(grid.shape),
            "cells_per_wavelength": round(float(wavelength_mm(rf.freqs_ghz.max()) / grid.cell_mm), 3),
            "effective_medium": DEFAULT_MODEL, "as_designed_grid": dgrid.to_dict(),
            "model": ("losses: per-cell coherent transfer matrix along the axis (normal incidence); focus: "
                      "the illumination marched up through the part slice by slice (scalar split-step "
                      "beam propagation on sub-cells, loss from Im n, the faces' transmission from the "
                      "transfer matrices), then scalar angular-spectrum propagation from the part's top"),
        },
    }


def _band(models: dict, printer: PrinterProfile) -> dict:
    """Return min and max over the nominal print and its four tolerance variants, and each variant's values."""
    def values(model):
        out = {"transmission_loss_db": -10 * np.log10(model.losses.transmission)}
        if model.focus is not None:
            out["best_focus_mm"] = np.array([m.best_focus_mm for m in model.focus])
            out["wavefront_focus_mm"] = np.array([m.wavefront_focus_mm for m in model.focus])
            out["strehl"] = np.array([m.strehl for m in model.focus])
            out["fwhm_mm"] = np.array([np.mean(m.fwhm_mm) for m in model.focus])
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


def _figures(rf: RFValues, printed: _Model, design: _Model, illum: Illumination, grid) -> dict[str, bytes]:
    spill_db = float(-10 * np.log10(max(1 - illum.spillover_fraction, 1e-12)))
    p = printed.losses.to_dict(spill_db)
    d = design.losses.to_dict(spill_db)
    mid = len(rf.freqs_ghz) // 2
    out = {
        "optics_loss.png": figures.loss_png(rf.freqs_ghz, p["absorption_db"], p["reflection_db"], p["spillover_db"],
                                            d["transmission_loss_db"]),
        "optics_phase_map.png": figures.phase_map_png(_phase_from_axis(printed.sparams.s21[mid], grid.axis_index),
                                                      illum.aperture, grid.cell_mm, float(rf.freqs_ghz[mid])),
    }
    if printed.focus is not None:
        out["optics_fwhm.png"] = figures.fwhm_png(rf.freqs_ghz, [m.fwhm_mm for m in printed.focus],
                                                  [m.diffraction_limited_fwhm_mm for m in printed.focus])
        m = printed.focus[mid]
        out["optics_focal_plane.png"] = figures.focal_plane_png(
            np.abs(m.spot.field) ** 2, np.abs(m.ideal.field) ** 2, grid.cell_mm, m.spot.peak_index,
            float(rf.freqs_ghz[mid]), m.best_focus_mm)
    return out


def _phase_from_axis(s21: np.ndarray, axis_index: tuple[int, int]) -> np.ndarray:
    """Return arg(S21) relative to the axis cell, wrapped to [-pi, pi]."""
    return np.angle(s21 * np.conj(s21[axis_index]))

"""Requirement findings: met, missed as designed, lost in printing, not evaluated; meets_requirements."""

from dataclasses import replace

import numpy as np
import pytest

from services import catalogue
from services.components import build_component
from services.findings import Finding, verdict_of
from services.report import build_report
from services.requirement_check import check_requirements
from services.requirements import Requirements
from services.settings import CheckSettings, OpticsSettings

BBOX = (24.0, 24.0, 4.6)


def _optics(*, designed, printed, stretched, key="strehl", freqs=(140.0,)):
    """Return an optics section shaped like the pipeline's, with one focus quantity per model."""
    focus = {"wavefront_focus_mm": [72.0] * len(freqs), key: printed}
    return {"frequencies_ghz": list(freqs), "transmission_loss_db": [1.0] * len(freqs), "focus": focus,
            "as_designed": {"transmission_loss_db": [0.9] * len(freqs),
                            "focus": {**focus, key: designed, "wavefront_focus_mm": [72.0] * len(freqs)}},
            "tolerance": {"variants": {"z_stretched": {key: stretched, "wavefront_focus_mm": [70.0] * len(freqs)},
                                       "z_squashed": {key: printed, "wavefront_focus_mm": [74.0] * len(freqs)}}}}


@pytest.mark.parametrize(("designed", "printed", "stretched", "status", "meets"), [
    ([0.95], [0.93], [0.92], "met", "yes"),
    ([0.7], [0.68], [0.66], "missed", "no"),
    ([0.95], [0.75], [0.74], "lost_in_printing", "no"),
    ([0.95], [0.9], [0.78], "lost_in_printing", "no"),
])
def test_each_target_is_judged_as_designed_as_printed_and_over_the_tolerance_band(designed, printed, stretched,
                                                                                   status, meets):
    out = check_requirements(Requirements(min_strehl=0.8), bbox_mm=BBOX,
                             optics=_optics(designed=designed, printed=printed, stretched=stretched))
    (outcome,) = out.outcomes
    assert (outcome.status, out.meets) == (status, meets)
    (finding,) = out.findings
    assert finding.rule == "requirement" and finding.limit == 0.8
    assert finding.severity == ("note" if status == "met" else "blocker")
    if status == "lost_in_printing":
        assert "not the design, is the problem" in finding.message
    if status == "missed":
        assert "missed by 0.1" in finding.message and finding.measured == 0.7


def test_the_worst_frequency_in_the_band_decides_and_frequencies_outside_it_do_not_count():
    """Loss 1 dB inside the band, 5 dB at 200 GHz outside it: met; over the band average the same."""
    optics = _optics(designed=[0.9] * 3, printed=[0.9] * 3, stretched=[0.9] * 3, freqs=(130.0, 140.0, 200.0))
    optics["transmission_loss_db"] = [1.0, 1.2, 5.0]
    req = Requirements(band_ghz=(130, 150), max_insertion_loss_db=1.1)
    (outcome,) = check_requirements(req, optics=optics, bbox_mm=BBOX).outcomes
    assert outcome.status == "lost_in_printing" and outcome.freq_ghz == 140.0 and outcome.as_printed == 1.2
    # Band average of 1.0 and 1.2 dB in power: -10 log10(mean(10^-0.1, 10^-0.12)) = 1.0995 dB (by hand).
    (mean,) = check_requirements(replace(req, loss_basis="band_average"), optics=optics, bbox_mm=BBOX).outcomes
    assert mean.status == "met" and mean.as_printed == pytest.approx(1.0995, abs=1e-3)


def test_the_focal_length_is_held_at_both_ends_of_the_tolerance():
    """Wavefront focus 72 mm nominal, 70 and 74 mm at the ends of the band: 72 +- 1 mm is lost in printing."""
    optics = _optics(designed=[0.9], printed=[0.9], stretched=[0.9])
    tight = check_requirements(Requirements(focal_length_mm=72, focal_tolerance_mm=1), optics=optics, bbox_mm=BBOX)
    loose = check_requirements(Requirements(focal_length_mm=72, focal_tolerance_mm=3), optics=optics, bbox_mm=BBOX)
    assert (tight.meets, loose.meets) == ("no", "yes")


def test_geometry_targets_and_what_cannot_be_computed():
    """Thickness and diameter come from the part; focus targets without a focus are not met, with the reason."""
    optics = _optics(designed=[0.9], printed=[0.9], stretched=[0.9])
    del optics["focus"], optics["as_designed"]["focus"]
    out = check_requirements(Requirements(max_thickness_mm=5, max_diameter_mm=20, min_strehl=0.8, min_mode_purity=0.9),
                             optics=optics, bbox_mm=BBOX)
    status = {o.requirement: o.status for o in out.outcomes}
    assert status == {"max_thickness_mm": "met", "max_diameter_mm": "missed", "min_strehl": "not_evaluated",
                      "min_mode_purity": "not_evaluated"}
    assert out.meets == "no"
    assert any("no focal length was given" in f.message for f in out.findings)


def test_nothing_stated_is_not_stated():
    assert check_requirements(None, optics=None, bbox_mm=BBOX).meets == "not_stated"
    assert check_requirements(Requirements(band_ghz=(130, 150)), optics=None, bbox_mm=BBOX).meets == "not_stated"


def test_requirement_findings_stay_out_of_the_verdict():
    """A missed target is a blocker of its own family: the part is still printable."""
    missed = Finding(rule="requirement", severity="blocker", message="Requirement missed.")
    assert verdict_of([missed]) == "printable"


RESIN = catalogue.material("standard-resin")


def _lens_report(z_accuracy_mm: float):
    """An 8 mm, f = 8 mm plano-convex lens at 1000 GHz (Fresnel number a^2 / (lambda f) = 6.7) on Bay 1."""
    lens = build_component("plano-convex", {"diameter_mm": 8, "focal_length_mm": 8, "freq_ghz": 1000,
                                            "base_thickness_mm": 0.3}, material=RESIN).part
    bay = replace(catalogue.printer("bay1-lcd-resin"), z_accuracy_mm=z_accuracy_mm)
    settings = CheckSettings(optics=OpticsSettings(freqs_ghz=(1000.0,), focal_length_mm=8.0),
                             requirements=Requirements(max_spot_fwhm_ratio=1.2))
    return build_report(part=lens, printer=bay, material=RESIN, settings=settings).to_dict()


def test_a_plano_convex_lens_meets_a_spot_target_as_designed_and_loses_it_to_the_printers_z_accuracy():
    """Spot FWHM at the design focal plane within 1.2x the diffraction limit: met as designed, and as printed
    on a printer holding 0.05 mm in z; with 0.5 mm z accuracy the stretched print focuses short and misses it.
    (Against the ideal wave from the exit surface the limit is 0.341 mm, not 0.328 mm: 0.3 mm in z then
    reads 1.17x, just inside; 0.5 mm reads several times the limit.)

    The diffraction limit is checked against the Airy width 1.029 lambda N (Born & Wolf 8.5, uniform pupil),
    which a 10 dB edge taper broadens by a few to some 15 % (Goldsmith 1998, ch. 6; from memory).
    """
    fine, coarse = _lens_report(0.05), _lens_report(0.5)
    lam, n_f = 299.792458 / 1000.0, 8.0 / 8.0
    limit = np.mean(fine["optics"]["as_designed"]["focus"]["diffraction_limited_fwhm_mm"][0])
    assert 1.029 * lam * n_f <= limit <= 1.2 * 1.029 * lam * n_f
    assert fine["meets_requirements"] == "yes" and fine["verdict"] != "not_printable"
    assert coarse["meets_requirements"] == "no"
    (outcome,) = coarse["requirements"]["outcomes"]
    assert outcome["status"] == "lost_in_printing" and outcome["as_designed"] <= 1.2
    assert outcome["tolerance_worst"] > 1.2 and outcome["tolerance_variant"] == "z_stretched"
    (finding,) = [f for f in coarse["findings"] if f["rule"] == "requirement"]
    assert finding["severity"] == "blocker" and "lost in printing" in finding["message"]
    assert coarse["verdict"] == fine["verdict"]


def test_optics_not_computed_leave_optical_targets_unevaluated_with_the_reason():
    out = check_requirements(Requirements(min_strehl=0.8), bbox_mm=BBOX,
                             optics={"not_computed": "No clear aperture.", "frequency_note": None})
    (outcome,) = out.outcomes
    # Nothing missed, nothing judged: not a "no" (the part may well meet it), and not a "yes".
    assert outcome.status == "not_evaluated" and "No clear aperture" in outcome.why and out.meets == "not_evaluated"


def test_meets_says_no_only_for_a_missed_target_and_not_evaluated_where_one_could_not_be_judged():
    """A vortex purity target on a part with no vortex, beside a met thickness target: not all evaluated, and the
    page says so in words; with a missed target beside it the answer is no."""
    from services.render.tables import meets_label

    optics = _optics(designed=[0.9], printed=[0.9], stretched=[0.9])
    met_and_unjudged = check_requirements(Requirements(max_thickness_mm=5, min_mode_purity=0.9), optics=optics,
                                          bbox_mm=BBOX)
    assert sorted(o.status for o in met_and_unjudged.outcomes) == ["met", "not_evaluated"]
    assert met_and_unjudged.meets == "not_evaluated" and meets_label("not_evaluated") == "Not all targets evaluated"
    (unjudged,) = [f.message for f in met_and_unjudged.findings if "could not be checked" in f.message]
    assert 'read "not all evaluated"' in unjudged and "Counted as not met" not in unjudged
    missed_too = check_requirements(Requirements(max_diameter_mm=1, min_mode_purity=0.9), optics=optics, bbox_mm=BBOX)
    assert missed_too.meets == "no"


def test_a_strehl_ratio_that_measures_nothing_is_not_judged():
    """A Strehl ratio above 1 with the on-axis peak well short of the ideal wave's (services.optics.checks), as
    printed or as designed, is not judged, and says why; the same ratio with the peaks together is judged."""
    def optics(best_mm):
        out = _optics(designed=[1.41], printed=[1.38], stretched=[1.2])
        for focus in (out["focus"], out["as_designed"]["focus"]):
            focus.update(best_focus_mm=[best_mm], ideal_peak_mm=[18.2])
        return out

    (outcome,) = check_requirements(Requirements(min_strehl=0.8), bbox_mm=BBOX, optics=optics(7.4)).outcomes
    assert outcome.status == "not_evaluated" and "reads 1.41, above 1" in outcome.why
    (outcome,) = check_requirements(Requirements(min_strehl=0.8), bbox_mm=BBOX, optics=optics(18.0)).outcomes
    assert outcome.status == "met"

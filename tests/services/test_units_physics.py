"""Units from physics: a part's size against its design wavelength and the printer's build volume."""

import io

import pytest
import trimesh

from services import catalogue
from services.components import build_component, export_mesh
from services.intake import read_part
from services.report import build_report
from services.settings import CheckSettings, OpticsSettings
from services.units_physics import units_findings

C_MM_GHZ = 299.792458  # speed of light, mm GHz (CODATA exact value of c)
BAY1 = catalogue.printer("bay1-lcd-resin")
RESIN = catalogue.material("standard-resin")


@pytest.fixture(scope="module")
def inch_lens_stl() -> bytes:
    """The demo 60 mm, f = 72 mm, 140 GHz lens written out in inches (60 / 25.4 = 2.362 units across)."""
    lens = build_component("plano-convex", {"diameter_mm": 60, "focal_length_mm": 72, "freq_ghz": 140},
                           material=RESIN).part
    mesh = trimesh.load(io.BytesIO(export_mesh(lens, "stl")), file_type="stl", process=False)
    mesh.apply_scale(1 / 25.4)  # 1 inch = 25.4 mm exactly (international inch, 1959)
    return mesh.export(file_type="stl")


def test_the_inch_lens_read_as_mm_gets_a_units_caution_naming_inch(inch_lens_stl):
    """Read as mm it is 2.36 mm across, 1.1 wavelengths at 140 GHz (lambda = c / f = 2.14 mm): under 3."""
    part = read_part(inch_lens_stl, name="lens.stl")
    assert max(part.bbox_mm) == pytest.approx(60 / 25.4, rel=1e-3)
    settings = CheckSettings(optics=OpticsSettings(freqs_ghz=(140.0,)))
    report = build_report(part=part, printer=BAY1, material=RESIN, settings=settings)
    (caution,) = [f for f in report.findings if f.rule == "units" and "wavelengths" in f.message]
    assert caution.severity == "caution" and report.verdict != "printable"
    assert caution.limit == pytest.approx(3 * C_MM_GHZ / 140.0)
    # Read in inch it is the 60 mm lens, 28 wavelengths: named first, before cm (23.6 mm, 11 wavelengths).
    assert caution.message.index("read in inch it is 60 mm") < caution.message.index("read in cm")


def test_it_says_nothing_without_a_frequency_or_for_a_plausible_size():
    assert units_findings(extent_mm=2.36, unit="mm", freqs_ghz=(), build_volume_mm=(130, 80, 160)) == []
    assert units_findings(extent_mm=60.0, unit="mm", freqs_ghz=(140.0,), build_volume_mm=(130, 80, 160)) == []


def test_a_part_larger_than_the_build_volume_by_a_unit_factor_names_the_unit():
    """A 60 mm lens drawn in mm but read as cm is 600 mm across: read in mm it fits Bay 1."""
    (caution,) = units_findings(extent_mm=600.0, unit="cm", freqs_ghz=(140.0,), build_volume_mm=(130, 80, 160))
    assert "read in mm it is 60 mm" in caution.message and caution.limit == 160


def test_a_part_too_large_for_any_unit_to_help_is_left_to_the_build_volume_rule():
    """300 mm read in mm: in um it is 0.3 mm (under 3 wavelengths), no other unit fits; build_fit speaks."""
    assert units_findings(extent_mm=300.0, unit="mm", freqs_ghz=(140.0,), build_volume_mm=(130, 80, 160)) == []

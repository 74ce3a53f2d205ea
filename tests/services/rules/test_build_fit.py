"""Rule build_fit: the part fits the build volume, at the best turn about z, so many per plate."""

import numpy as np
import trimesh

from services.part import Part
from services.profiles import PrinterProfile
from services.rules.build_fit import check_build_fit, copies_per_plate, footprint_at_best_turn


def _printer(volume=(130.0, 80.0, 160.0), spacing=5.0):
    return PrinterProfile(slug="p", name="Test printer", process="vat_photopolymerisation", technology="lcd_masked",
                          pixel_mm=0.05, layer_height_mm=0.05, layer_heights_mm=(0.05,), build_volume_mm=volume,
                          rules={"build_fit": {"spacing_mm": spacing}})


def _box_part(x, y, z):
    m = trimesh.creation.box(extents=(x, y, z))
    return Part(name="box", sha256="t", source_format="generated", units="mm", vertices_mm=m.vertices,
                faces=m.faces, bodies=1, watertight=True, volume_mm3=m.volume)


def test_it_fits_a_small_part_without_turning():
    """A part smaller than the plate fits at 0 deg with no finding."""
    findings, summary = check_build_fit(_box_part(30, 30, 10), _printer())
    assert findings == [] and summary["turn_deg"] == 0.0


def test_it_turns_a_long_part_square_first():
    """A 100 x 20 mm part on an 80 x 130 mm plate fits turned 90 deg (a square turn before any other)."""
    angle, w, d = footprint_at_best_turn(np.array([[0, 0], [100, 0], [100, 20], [0, 20]], float), (80, 130))
    assert angle == 90.0 and np.isclose(w, 20) and np.isclose(d, 100)


def test_it_finds_a_diagonal_turn_when_no_square_one_fits():
    """A 100 x 20 mm bar fits a 90 x 90 mm plate only on a diagonal; the bar's diagonal 102 mm fits 127 mm."""
    angle, w, d = footprint_at_best_turn(np.array([[0, 0], [100, 0], [100, 20], [0, 20]], float), (90, 90))
    assert 0 < angle < 90 and w <= 90 and d <= 90


def test_it_blocks_a_part_taller_than_the_build_volume():
    """Height beyond the printer's z travel is a blocker with the measured height and the limit."""
    findings, _ = check_build_fit(_box_part(10, 10, 200), _printer())
    assert [f.severity for f in findings] == ["blocker"] and findings[0].measured == 200 and findings[0].limit == 160


def test_it_blocks_a_footprint_that_fits_no_turn():
    """A 150 x 150 mm footprint fits a 130 x 80 mm plate at no turn."""
    findings, _ = check_build_fit(_box_part(150, 150, 5), _printer())
    assert any(f.severity == "blocker" and "does not fit" in f.message for f in findings)


def test_copies_follow_the_grid_with_spacing():
    """Copies of a 20 x 20 mm footprint with 5 mm spacing on 130 x 80 mm: floor(135/25) x floor(85/25) = 5 x 3."""
    assert copies_per_plate(20, 20, (130, 80), 5) == 15


def test_a_footprint_that_fits_no_turn_is_measured_on_the_side_that_fails():
    """100 x 100 mm on a 130 x 80 mm plate: the shorter sides fail (100 mm against 80 mm, not against 130 mm);
    150 x 50 mm on it: the longer sides do (150 against 130). A 150 x 50 mm bar's diagonal turn would need a
    plate wider than 80 mm at 130 mm, so neither turns."""
    for (x, y), measured, limit in (((100, 100), 100, 80), ((150, 50), 150, 130)):
        findings, _ = check_build_fit(_box_part(x, y, 5), _printer())
        blocker = next(f for f in findings if "does not fit" in f.message)
        assert (blocker.measured, blocker.limit) == (measured, limit)

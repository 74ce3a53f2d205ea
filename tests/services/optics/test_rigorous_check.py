"""A generated pillar plate checked end to end with rigorous cells."""

import numpy as np
import pytest

from services.components import build_component
from services.layers import build_layer_stack, orient_part
from services.optics import optics_report
from services.settings import OpticsSettings
from tests.services.optics.helpers import material, printer


@pytest.mark.slow
def test_a_declared_square_pillar_plate_is_checked_with_a_cached_rigorous_table(tmp_path, monkeypatch):
    """The generator builds the table the check asks for (same key), so both checks read it from the cache and
    name the model and its convergence; the cache holds the generator's probe table and that one."""
    monkeypatch.setenv("PHASEWRIGHT_CELL_TABLE_DIR", str(tmp_path))
    resin, bay = material(2.8, 0.03), printer(pixel_mm=0.05, layer_mm=0.05)
    component = build_component("graded-index", {"freq_ghz": 300.0, "diameter_mm": 8, "focal_length_mm": 12,
                                                 "flange_width_mm": 0, "cell": "pillar", "lattice": "square"},
                                material=resin, printer=bay)
    part = orient_part(component.part, "+z")
    stack = build_layer_stack(part, pixel_mm=bay.pixel_mm, layer_height_mm=bay.layer_height_mm)
    settings = OpticsSettings(freqs_ghz=(300.0,))
    first = optics_report(part=part, printed=stack, material=resin, printer=bay, settings=settings).to_dict()
    again = optics_report(part=part, printed=stack, material=resin, printer=bay, settings=settings).to_dict()
    model = first["analysis"]["cell_model"]
    assert model["model"] == "rigorous_table" and model["table"]["source"].startswith("cache")
    assert again["analysis"]["cell_model"]["table"]["source"] == model["table"]["source"]
    assert model["table"]["key"] == component.derived["cell_model"]["table"]["key"]
    assert model["table"]["convergence"]["max_change_deg"] < 2.0
    assert len(list(tmp_path.glob("cell-*.npz"))) == 2
    assert np.isfinite(first["transmission_loss_db"]).all()

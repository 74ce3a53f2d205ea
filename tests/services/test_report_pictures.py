"""The report's overview pictures: a top view and a perspective view, findings numbered on both."""

import io

import numpy as np
import trimesh
from PIL import Image

from services.findings import Finding
from services.layers import LayerStack
from services.pictures import SEVERITY_RGB
from services import pictures
from services.report import _overview_pictures, _prepared_views, finding_markers


def _finding(severity, where, rule="min_feature"):
    return Finding(rule=rule, severity=severity, message="m", location_mm=where)


def test_findings_at_one_spot_share_a_marker():
    """Numbers follow the report's order; findings within 0.5 mm share one marker in the first one's colour."""
    findings = [_finding("blocker", (1.0, 2.0, 0.5)), _finding("blocker", (1.1, 2.1, 0.6), "aspect_ratio"),
                _finding("caution", None, "overhang"), _finding("note", (8.0, 8.0, 1.0), "min_gap")]
    markers = finding_markers(findings)
    assert [(m.label, m.severity) for m in markers] == [("1, 2", "blocker"), ("4", "note")]
    assert markers[0].xyz_mm == (1.0, 2.0, 0.5)


def test_it_draws_both_views_with_markers(make_part):
    """Both pictures are PNGs and both show the blocker's marker colour."""
    box = trimesh.creation.box(extents=(4, 4, 1))
    box.apply_translation((2, 2, 0.5))
    stack = LayerStack.from_masks([np.ones((40, 40), bool)] * 10, pixel_mm=0.1, layer_height_mm=0.1)
    part = make_part(box)
    prepared, drawn = _prepared_views(part, stack)
    findings = [_finding("blocker", (2.0, 2.0, 1.0))]
    figures = _overview_pictures(drawn, findings)
    assert set(figures) == {"thickness_map.png", "perspective.png"}
    for png in figures.values():
        rgb = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)
        assert np.all(np.abs(rgb - np.array(SEVERITY_RGB["blocker"])) <= 12, axis=-1).sum() > 50
    # Drawn before the findings are known (beside the rules) and marked after, the pictures are those drawn in one go.
    markers = finding_markers(findings)
    thick = stack.thickness_mm
    assert figures["thickness_map.png"] == pictures.map_png(
        thick, pixel_mm=0.1, unit="mm", mask=thick > 0, markers=markers, origin_mm=stack.origin_mm[:2],
        title="As-printed thickness, seen from above (+z)")
    assert figures["perspective.png"] == pictures.perspective_png(
        prepared.vertices_mm, prepared.faces, markers=markers, title="The part as built, in perspective (build plate below)")

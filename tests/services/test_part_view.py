"""The 3D view's data: decimation keeps the shape, outlines sit on the layers, markers follow the report's numbers."""

import base64
import json
import math

import cv2
import numpy as np
import trimesh

from services.findings import Finding
from services.layers import build_layer_stack
from services.part_view import MAX_TRIANGLES, decimated_mesh, layer_outlines, part_view_json


def _decode(text, dtype):
    return np.frombuffer(base64.b64decode(text), dtype=dtype)


def test_decimation_keeps_a_spheres_area_and_volume():
    """A 327,680-triangle sphere drawn with at most 40,000 triangles keeps 4 pi r^2 and 4/3 pi r^3 within 1 %
    (analytic sphere; the decimated mesh is a closed shell again)."""
    sphere = trimesh.creation.icosphere(subdivisions=7, radius=20.0)
    vertices, faces = decimated_mesh(sphere.vertices, sphere.faces)
    assert len(faces) <= MAX_TRIANGLES and len(faces) > MAX_TRIANGLES // 4
    mesh = trimesh.Trimesh(vertices, faces, process=False)
    assert abs(mesh.area / (4 * math.pi * 20.0 ** 2) - 1) < 0.01
    assert abs(mesh.volume / (4 / 3 * math.pi * 20.0 ** 3) - 1) < 0.01


def test_a_small_mesh_is_sent_as_it_is():
    box = trimesh.creation.box(extents=(3, 4, 5))
    vertices, faces = decimated_mesh(box.vertices, box.faces)
    assert np.array_equal(faces, box.faces) and np.allclose(vertices, box.vertices)


def test_outlines_of_a_box_trace_its_footprint_on_its_layers(make_part):
    """A 10 x 6 x 2 mm box at 0.05 mm pixels and 0.1 mm layers: one run of 20 identical layers, one loop whose
    corners are the box's within one pixel."""
    box = trimesh.creation.box(extents=(10, 6, 2))
    box.apply_translation((5, 3, 1))
    stack = build_layer_stack(make_part(box), pixel_mm=0.05, layer_height_mm=0.1)
    outlines = layer_outlines(stack)
    assert outlines["every"] == 1 and len(outlines["runs"]) == 1
    run = outlines["runs"][0]
    assert (run["first"], run["last"]) == (0, 19) and len(run["loops"]) == 1
    xy = _decode(run["loops"][0], np.float32).reshape(-1, 2)
    assert np.allclose(xy.min(axis=0), (0, 0), atol=0.05) and np.allclose(xy.max(axis=0), (10, 6), atol=0.05)


def test_markers_carry_the_report_numbers_and_skip_unlocated_findings(make_part):
    box = trimesh.creation.box(extents=(4, 4, 1))
    box.apply_translation((2, 2, 0.5))
    part = make_part(box)
    stack = build_layer_stack(part, pixel_mm=0.1, layer_height_mm=0.1)
    findings = [Finding("min_feature", "blocker", "a fin is too thin", location_mm=(1.0, 2.0, 0.5), layers=(3, 7)),
                Finding("overhang", "note", "no location"),
                Finding("island", "caution", "an island", location_mm=(3.0, 3.0, 0.9), layers=(8, 8)),
                Finding("min_gap", "caution", "a gap beside the fin", location_mm=(1.1, 2.1, 0.5), layers=(2, 5))]
    view = json.loads(part_view_json(part, stack, findings))
    assert view["schema"] == "phasewright.part-view/1"
    # Findings 1 and 4 lie within 0.5 mm: one marker "1, 4" in the worst severity, spanning both layer ranges.
    assert [(m["numbers"], m["severity"], m["layers"]) for m in view["markers"]] == [([1, 4], "blocker", [2, 7]),
                                                                                   ([3], "caution", [8, 8])]
    assert view["layers"]["count"] == 10 and view["mesh"]["triangles"] == 12
    positions = _decode(view["mesh"]["positions"], np.float32).reshape(-1, 3)
    assert np.allclose(positions.min(axis=0), (0, 0, 0)) and np.allclose(positions.max(axis=0), (4, 4, 1))


def test_outlines_read_from_each_runs_box_are_the_whole_frames():
    """Outlines are traced in each run's solid box (grown by a void pixel): loop for loop and point for point the
    outlines OpenCV traces on the whole frame, for blobs with holes touching every side of the frame, runs that
    change, and an empty layer."""
    from services.layers import LayerStack

    rng = np.random.default_rng(4)
    yy, xx = np.mgrid[:90, :130]
    masks = []
    for k in range(6):
        mask = (np.hypot(yy - 40, xx - 60) < 38 - 5 * k) & ~(np.hypot(yy - 45, xx - 70) < 6)
        mask |= (xx < 3) | (yy > 86 - k)  # on the frame's left and bottom edges
        mask ^= rng.random(mask.shape) < 0.01
        masks.append(mask)
    masks.insert(3, np.zeros((90, 130), bool))
    stack = LayerStack.from_masks(masks, pixel_mm=0.1, layer_height_mm=0.1, origin_mm=(-2.0, 1.0, 0.0))
    outlines = layer_outlines(stack, max_points=10**9)
    assert len(outlines["runs"]) == len(masks)
    for run, (first, last, mask) in zip(outlines["runs"], stack.runs()):
        contours, _ = cv2.findContours(mask.view(np.uint8), cv2.RETR_LIST, cv2.CHAIN_APPROX_SIMPLE)
        whole = [c for c in (cv2.approxPolyDP(c, 0.75, True) for c in contours) if len(c) >= 2]
        assert (run["first"], run["last"]) == (first, last) and len(run["loops"]) == len(whole)
        for loop, c in zip(run["loops"], whole):
            xy = _decode(loop, np.float32).reshape(-1, 2)
            expected = np.column_stack([-2.0 + (c[:, 0, 0] + 0.5) * 0.1, 1.0 + (c[:, 0, 1] + 0.5) * 0.1])
            np.testing.assert_array_equal(xy, expected.astype(np.float32))


def _squares_stack(counts):
    """Return a stack whose run k holds counts[k] separate 4 x 4 px squares (four points each once traced)."""
    from services.layers import LayerStack

    masks = []
    for k, n in enumerate(counts):
        mask = np.zeros((50, 200), bool)
        for j in range(n):  # odd runs one pixel to the right: no two neighbouring layers are alike, one run each
            r, c = 1 + 6 * (j // 33), 1 + k % 2 + 6 * (j % 33)
            mask[r:r + 4, c:c + 4] = True
        masks.append(mask)
    return LayerStack.from_masks(masks, pixel_mm=0.1, layer_height_mm=0.1, origin_mm=(0.0, 0.0, 0.0))


def test_outlines_of_many_runs_are_thinned_from_a_sample_without_tracing_every_run(monkeypatch):
    """64 runs of 50-59 squares (200-236 points each) under a 2,000-point bound: all traced, the exact thinning
    would be every ceil(13,968 / 2,000) = 7th run; the sample picks it (or one more) and traces far fewer runs.
    With most points in a few runs the sample underestimates, and the runs shown are thinned further until they fit."""
    from services import part_view

    calls = []
    real = part_view._run_loops
    monkeypatch.setattr(part_view, "_run_loops", lambda *a: calls.append(1) or real(*a))
    counts = [50 + k % 10 for k in range(64)]
    stack = _squares_stack(counts)
    whole = layer_outlines(stack, max_points=10**9)
    assert [sum(len(_decode(loop, np.float32)) // 2 for loop in r["loops"]) for r in whole["runs"]] == [4 * n for n in counts]
    calls.clear()
    exact = int(np.ceil(4 * sum(counts) / 2000))
    outlines = layer_outlines(stack, max_points=2000)
    assert exact <= outlines["every"] <= exact + 1 and len(calls) < 64 / 2
    shown = [r["first"] for r in outlines["runs"]]
    assert shown == list(range(0, 64, outlines["every"]))
    points = sum(len(_decode(loop, np.float32)) // 2 for r in outlines["runs"] for loop in r["loops"])
    assert points <= 2000 and points == sum(4 * counts[k] for k in shown)

    lopsided = [1] * 64
    for k in (3, 5, 7, 9, 11, 13):
        lopsided[k] = 400  # none of them in the sample (every 4th run)
    outlines = layer_outlines(_squares_stack(lopsided), max_points=2000)
    shown = [r["first"] for r in outlines["runs"]]
    assert sum(4 * lopsided[k] for k in shown) <= 2000 and shown == list(range(0, 64, outlines["every"]))

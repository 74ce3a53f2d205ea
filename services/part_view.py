"""The part for the report page's 3D view: a decimated mesh, the as-printed layer outlines, numbered markers.

The worker writes this once per check as JSON (typed arrays in base64) so the browser never reads the
uploaded mesh: a 2-million-triangle part reaches the page as at most ``MAX_TRIANGLES`` triangles, and the
layer stack as the outlines of its runs of identical layers (what the printer builds, terraces and all).
"""

from __future__ import annotations

import base64
import json
from dataclasses import dataclass

import cv2
import numpy as np

from services.findings import Finding
from services.pictures import cluster_vertices

SCHEMA = "phasewright.part-view/1"
MAX_TRIANGLES = 40_000
MAX_OUTLINE_POINTS = 120_000
SAMPLED_RUNS = 16  # runs traced first, evenly spread, to choose how many of all the runs the view shows


def decimated_mesh(vertices_mm: np.ndarray, faces: np.ndarray, max_triangles: int = MAX_TRIANGLES
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Return (float32 vertices, uint32 faces) with at most ``max_triangles`` faces, by vertex clustering."""
    vertices, faces = cluster_vertices(vertices_mm, faces, max_triangles)
    return vertices.astype(np.float32), faces.astype(np.uint32)


def layer_outlines(stack, max_points: int = MAX_OUTLINE_POINTS) -> dict:
    """Return the outlines of each run of identical layers in mm, thinned to every k-th run if they are many.

    k comes from an even sample of the runs (their points once simplified, scaled to all runs), so that runs the
    view would drop are never traced: the 100 mm zoned lens traced all 133 of its runs to show 23 (1.3 s). If the
    runs shown still hold more than ``max_points``, k grows until they do not.
    """
    count = stack.run_count
    traced: dict[int, tuple] = {}

    def trace(indices: list[int]) -> None:
        for i, (first, last, corner, box) in zip(indices, stack.run_boxes(indices)):
            traced[i] = (first, last, _run_loops(stack, corner, box))

    def points(indices) -> int:
        return sum(len(loop) for i in indices for loop in traced[i][2])

    sample = list(range(0, count, max(1, -(-count // SAMPLED_RUNS))))
    trace(sample)
    every = max(1, int(np.ceil(points(sample) * count / len(sample) / max_points))) if sample else 1
    while True:
        shown = range(0, count, every)
        trace([i for i in shown if i not in traced])
        total = points(shown)
        if total <= max_points or every >= count:
            break
        every = max(every + 1, int(np.ceil(every * total / max_points)))
    return {
        "every": every,
        "runs": [{"first": traced[i][0], "last": traced[i][1], "loops": [_b64(loop) for loop in traced[i][2]]}
                 for i in shown],
    }


def _run_loops(stack, corner: tuple[int, int], box: np.ndarray) -> list[np.ndarray]:
    """Return a run's outline loops in mm (float32 (k, 2) each), traced in its solid box at ``corner`` (row, col):
    the contours, found in the same raster order, are the whole frame's."""
    if box.size == 0:
        return []
    r0, c0 = corner
    contours, _ = cv2.findContours(box.view(np.uint8), cv2.RETR_LIST, cv2.CHAIN_APPROX_SIMPLE, offset=(c0, r0))
    kept = [c for c in (cv2.approxPolyDP(c, 0.75, True) for c in contours) if len(c) >= 2]
    if not kept:
        return []
    # Pixel (col, row) -> mm at the pixel centre, as the stack's x/y centres; all loops of the run at once.
    c = np.concatenate(kept).reshape(-1, 2).astype(np.float64)
    ox, oy = stack.origin_mm[0], stack.origin_mm[1]
    xy = np.column_stack([ox + (c[:, 0] + 0.5) * stack.pixel_mm, oy + (c[:, 1] + 0.5) * stack.pixel_mm])
    ends = np.cumsum([len(k) for k in kept])[:-1]
    return np.split(xy.astype(np.float32), ends)


def view_markers(findings: list[Finding] | tuple[Finding, ...]) -> list[dict]:
    """Return a marker per located spot, numbered by the findings' places in the report's list (from 1).

    Findings within 0.5 mm of each other share one marker ("1, 2"), in the severity of the worst (the first).
    """
    spots: dict[tuple, dict] = {}
    for i, f in enumerate(findings, start=1):
        if f.location_mm is None:
            continue
        key = tuple(round(v * 2) for v in f.location_mm)
        if key in spots:
            spot = spots[key]
            spot["numbers"].append(i)
            if f.layers is not None:
                low, high = spot["layers"] or f.layers
                spot["layers"] = [min(low, f.layers[0]), max(high, f.layers[1])]
            continue
        spots[key] = {"number": i, "numbers": [i], "rule": f.rule, "severity": f.severity, "message": f.message,
                      "location_mm": [round(float(v), 3) for v in f.location_mm],
                      "layers": list(f.layers) if f.layers is not None else None}
    return list(spots.values())


@dataclass(frozen=True, slots=True)
class PreparedViews:
    """What the pictures and the 3D view draw that does not depend on the findings, made once per check."""

    vertices_mm: np.ndarray  # the decimated mesh (float32), for the perspective picture and the 3D view
    faces: np.ndarray
    outlines: dict  # layer_outlines(stack)


def prepare_views(part, stack) -> PreparedViews:
    """Return the decimated mesh and the layer outlines (the costly, finding-free part of the pictures)."""
    vertices, faces = decimated_mesh(part.vertices_mm, part.faces)
    return PreparedViews(vertices, faces, layer_outlines(stack))


def part_view_json(part, stack, findings, prepared: PreparedViews | None = None) -> str:
    """Return the 3D view's data for one checked part (its oriented mesh, layer stack and sorted findings)."""
    prepared = prepared or prepare_views(part, stack)
    vertices, faces = prepared.vertices_mm, prepared.faces
    lo, hi = part.bounds_mm
    view = {
        "schema": SCHEMA,
        "units": "mm",
        "bounds_mm": [[round(float(v), 4) for v in lo], [round(float(v), 4) for v in hi]],
        "mesh": {"positions": _b64(vertices), "indices": _b64(faces), "triangles": int(len(faces)),
                 "source_triangles": int(len(part.faces))},
        "layers": {"count": int(stack.count), "height_mm": float(stack.layer_height_mm),
                   "z0_mm": float(stack.origin_mm[2]), "pixel_mm": float(stack.pixel_mm), **prepared.outlines},
        "markers": view_markers(findings),
    }
    return json.dumps(view, separators=(",", ":"))


def _b64(array: np.ndarray) -> str:
    return base64.b64encode(np.ascontiguousarray(array).tobytes()).decode("ascii")

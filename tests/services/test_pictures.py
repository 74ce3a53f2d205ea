"""Pictures made by the worker: numbered markers where the findings are, and the perspective view."""

import io

import numpy as np
import pytest
import trimesh
from PIL import Image
from scipy.spatial import ConvexHull

from services import pictures
from services.pictures import SEVERITY_RGB, Marker, _Camera


def _image(png: bytes) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)


def _has_colour(rgb: np.ndarray, colour, tol: int = 12) -> np.ndarray:
    return np.all(np.abs(rgb - np.array(colour)) <= tol, axis=-1)


def test_the_camera_is_a_pinhole():
    """A point straight ahead lands on the axis; one offset by d at depth Z lands at d / Z.

    The pinhole model x = f X / Z (Hartley & Zisserman, Multiple View Geometry, 2nd ed., eq. 6.1, f = 1).
    """
    target = np.array([1.0, 2.0, 3.0])
    cam = _Camera.looking_at(target, 50.0, azimuth_deg=-35.0, elevation_deg=32.0)
    assert np.isclose(np.linalg.norm(cam.position - target), 50.0)
    for a, b in ((cam.right, cam.up), (cam.up, cam.forward), (cam.forward, cam.right)):
        assert abs(float(a @ b)) < 1e-12
    assert cam.up[2] > 0 and np.isclose(cam.right[2], 0.0)  # upright: the horizon stays level
    points = np.array([target, target + 4.0 * cam.right, target + 3.0 * cam.up])
    xy, depth = cam.project(points)
    assert np.allclose(depth, 50.0)
    assert np.allclose(xy, [[0, 0], [4.0 / 50.0, 0], [0, 3.0 / 50.0]])


def test_a_marker_lands_on_its_spot_on_the_top_view():
    """A marker at (x, y) mm sits on the pixel the layer stack's convention puts there."""
    values = np.ones((100, 200), np.float32)  # 10 x 20 mm at 0.1 mm pixels, origin (5, -3)
    png = pictures.map_png(values, pixel_mm=0.1, unit="mm", title="t", origin_mm=(5.0, -3.0),
                           markers=(Marker((15.0, 4.0, 0.0), "1", "blocker"),))
    rgb = _image(png)
    rows, cols = np.nonzero(_has_colour(rgb, SEVERITY_RGB["blocker"]))
    # map_png pads 16 px and puts the map 22 px lower; it scales the 200 px wide map to 520 px.
    scale = 520 / 200
    expected = (16 + (15.0 - 5.0) / 0.1 * scale, 16 + 22 + 100 * scale - (4.0 + 3.0) / 0.1 * scale)
    assert abs(cols.mean() - expected[0]) < 2 and abs(rows.mean() - expected[1]) < 2


def test_the_perspective_view_shows_the_part_and_its_markers():
    """A box draws shaded faces on the plate; a caution marker appears once, in its colour."""
    box = trimesh.creation.box(extents=(20, 10, 4))
    box.apply_translation((0, 0, 2))
    png = pictures.perspective_png(box.vertices, box.faces, title="box",
                                   markers=(Marker((0.0, 0.0, 4.0), "7", "caution"),))
    rgb = _image(png)
    part = np.all(rgb[..., 2:3] > rgb[..., 0:1] + 8, axis=-1) & (rgb.sum(axis=-1) < 640)  # blue-grey faces
    # A convex solid's silhouette is the convex hull of its projected corners (scipy's ConvexHull; the
    # drawing is made at twice the size and halved); the faces fill it within the anti-aliased rim.
    lo, hi = box.vertices.min(axis=0), box.vertices.max(axis=0)
    camera = _Camera.looking_at((lo + hi) / 2, 3.0 * float(np.linalg.norm(hi - lo)) + 1.0, -35.0, 32.0)
    plate, _ = pictures._plate_lines(lo, hi)
    fit = pictures._ScreenFit(np.concatenate([camera.project(box.vertices)[0], *(camera.project(p)[0] for p in plate)]), 1040)
    silhouette_px = ConvexHull(fit(camera.project(box.vertices)[0]) / 2).volume
    assert part.sum() == pytest.approx(silhouette_px, rel=0.03)
    assert _has_colour(rgb, SEVERITY_RGB["caution"]).sum() > 100
    assert _has_colour(rgb, SEVERITY_RGB["blocker"]).sum() == 0


def test_the_top_face_is_lit_more_than_the_sides():
    """With the light above, the top of a box is brighter than the faces that turn away (Lambert)."""
    box = trimesh.creation.box(extents=(10, 10, 10))
    cam = _Camera.looking_at(np.zeros(3), 60.0, -35.0, 32.0)
    order, shade = pictures._shaded_faces(box.vertices[box.faces], cam)
    normals = box.face_normals[order]
    assert len(order) == 6  # three faces of a cube face the camera, two triangles each
    assert shade[normals[:, 2] > 0.9].min() > shade[normals[:, 2] < 0.1].max()


def test_clustering_keeps_a_dense_mesh_drawable():
    """A dense sphere comes down under the face budget and keeps its size within one cell."""
    sphere = trimesh.creation.icosphere(subdivisions=6, radius=10.0)  # 81,920 faces
    vertices, faces = pictures.cluster_vertices(sphere.vertices, sphere.faces, max_faces=20_000)
    assert 1000 < len(faces) <= 20_000
    cell = 20.0 / 256
    assert np.allclose(vertices.min(axis=0), -10.0, atol=2 * cell)
    assert np.allclose(vertices.max(axis=0), 10.0, atol=2 * cell)
    coarse = trimesh.Trimesh(vertices, faces, process=False)
    # Volume of a sphere, 4/3 pi r^3, through trimesh's own volume integral.
    assert abs(abs(coarse.volume) - 4 / 3 * np.pi * 1000) / (4 / 3 * np.pi * 1000) < 0.05


def test_a_small_mesh_is_not_clustered():
    """Under the budget the mesh is drawn as it is."""
    box = trimesh.creation.box(extents=(1, 1, 1))
    vertices, faces = pictures.cluster_vertices(box.vertices, box.faces, max_faces=100)
    assert np.array_equal(faces, box.faces) and np.array_equal(vertices, box.vertices)


def test_a_one_pixel_problem_is_ringed_and_the_title_is_in_words():
    """One highlighted pixel in a 400 x 400 crop (about one screen pixel) gets a ring a designer can find;
    the rule is named in words in the title."""
    layer = np.ones((400, 400), bool)
    highlight = np.zeros_like(layer)
    highlight[100, 300] = True
    png = pictures.layer_crop_png(layer, highlight, pixel_mm=0.05, title="min_gap: layer 3, z = 0.35 mm")
    rgb = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)
    red = np.argwhere(_has_colour(rgb, pictures.HIGHLIGHT_RGB))
    assert len(red) > 40  # a ring of radius 8 px, 2 px wide, not a single dot
    centre = red.mean(axis=0)
    # The ring is centred on the pixel: column 300/400 of the crop, row 100 from the bottom (y up).
    img_w = rgb.shape[1] - 24
    assert abs((centre[1] - 12) / img_w - 300.5 / 400) < 0.02
    no_ring = pictures.layer_crop_png(layer, np.zeros_like(layer), pixel_mm=0.05, title="min_gap: layer 3")
    assert _has_colour(np.asarray(Image.open(io.BytesIO(no_ring)).convert("RGB")).astype(int),
                       pictures.HIGHLIGHT_RGB).sum() == 0


def _disc_map(pixel_mm: float) -> np.ndarray:
    n = int(round(80 / pixel_mm))
    centres = (np.arange(n) + 0.5) * pixel_mm - 40
    r = np.hypot(centres[None, :], centres[:, None])
    return np.where(r <= 30, 1.0 + 0.02 * r, 0.0)


def test_a_huge_frame_draws_the_same_map_as_a_coarse_one():
    """A 30 mm disc on a 4,000 x 4,000 frame (reduced before colouring) and on a 400 x 400 frame (not reduced)
    give the same picture: same size, the same share of solid pixels within 1 %, the same value range."""
    pictures_of = []
    for pixel_mm in (0.02, 0.2):
        thick = _disc_map(pixel_mm)
        png = pictures.map_png(thick, pixel_mm=pixel_mm, unit="mm", mask=thick > 0, title="t")
        pictures_of.append(np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int))
    fine, coarse = pictures_of
    assert fine.shape == coarse.shape
    solid = [(~_has_colour(img[30:-60, 16:-130], pictures.VOID_RGB, 3)).mean() for img in (fine, coarse)]
    # The disc covers pi 30^2 / 80^2 = 44.2 % of the frame (analytic), before the frame's white margin.
    assert abs(solid[0] - solid[1]) < 0.01

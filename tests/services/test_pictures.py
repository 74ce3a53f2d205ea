"""Pictures made by the worker: numbered markers where the findings are, and the perspective view."""

import io

import numpy as np
import trimesh
from PIL import Image

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
    assert part.sum() > 5000
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

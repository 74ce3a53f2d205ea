"""Small meshes for the web tests, built in code."""

import io

import trimesh


def box_stl(x_mm: float = 10.0, y_mm: float = 8.0, z_mm: float = 3.0) -> bytes:
    """Return a binary STL of a box resting on z = 0."""
    mesh = trimesh.creation.box(extents=(x_mm, y_mm, z_mm))
    mesh.apply_translation((0, 0, z_mm / 2))
    buf = io.BytesIO()
    mesh.export(buf, file_type="stl")
    return buf.getvalue()


def finned_plate_stl(fin_mm: float = 0.10) -> bytes:
    """Return a binary STL of a 10 x 10 x 1 mm plate with one thin fin standing on it."""
    plate = trimesh.creation.box(extents=(10, 10, 1))
    plate.apply_translation((0, 0, 0.5))
    fin = trimesh.creation.box(extents=(fin_mm, 6, 2))
    fin.apply_translation((0, 0, 1.99))
    mesh = trimesh.boolean.union([plate, fin], engine="manifold")
    buf = io.BytesIO()
    mesh.export(buf, file_type="stl")
    return buf.getvalue()

"""Fixtures for the domain-core tests: parts built in code, no files and no database."""

import manifold3d
import numpy as np
import pytest
import trimesh

from services.part import Part


def _checked(manifold: manifold3d.Manifold) -> manifold3d.Manifold:
    """Fail the test when manifold3d reports a status instead of raising."""
    status = manifold.status()
    if status != manifold3d.Error.NoError:
        raise AssertionError(f"manifold3d returned {status} while building a test part")
    return manifold


def _make_part(shape, name: str = "test") -> Part:
    """Return a Part from a manifold3d Manifold or a trimesh Trimesh, in millimetres."""
    if isinstance(shape, manifold3d.Manifold):
        mesh = _checked(shape).to_mesh()
        vertices = np.asarray(mesh.vert_properties, dtype=np.float64)[:, :3]
        faces = np.asarray(mesh.tri_verts, dtype=np.int64)
        bodies, volume = len(shape.decompose()), float(shape.volume())
        watertight = True
    elif isinstance(shape, trimesh.Trimesh):
        vertices = np.asarray(shape.vertices, dtype=np.float64)
        faces = np.asarray(shape.faces, dtype=np.int64)
        bodies, volume, watertight = int(shape.body_count), float(shape.volume), bool(shape.is_watertight)
    else:
        raise TypeError(f"make_part needs a Manifold or a Trimesh, not {type(shape).__name__}")
    return Part(
        name=name, sha256="test", source_format="generated", units="mm", vertices_mm=vertices,
        faces=faces, bodies=bodies, watertight=watertight, volume_mm3=volume,
    )


@pytest.fixture(scope="session")
def make_part():
    """Return make_part(manifold_or_trimesh, name="test") -> Part."""
    return _make_part

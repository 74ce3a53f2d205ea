"""Tests for services.intake.merge: the packed key sort and the exact corner merge, float32 and float64."""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from services.intake import merge
from services.intake.health import _edge_table
from services.intake.merge import _merge_vertices, _sort_with_order


def soup(dtype) -> tuple[np.ndarray, np.ndarray]:
    """Return an icosphere as a triangle soup (every corner repeated once per face), with signed zeros in it."""
    sphere = trimesh.creation.icosphere(subdivisions=3, radius=7.0)
    corners = sphere.vertices[sphere.faces].reshape(-1, 3).astype(dtype)
    corners[np.abs(corners) < 1e-9] = 0.0
    corners[::7][corners[::7] == 0.0] = -0.0  # some copies of a corner say -0.0: different bits, not merged
    return corners, np.arange(len(corners)).reshape(-1, 3)


def bits(array: np.ndarray) -> bytes:
    """Return an array's dtype, shape and bytes, to compare arrays bit for bit."""
    return str(array.dtype).encode() + str(array.shape).encode() + np.ascontiguousarray(array).tobytes()


@pytest.mark.parametrize("scale", [1.0, 25.4, 1e-3])
def test_float32_corners_merge_exactly_as_their_float64_values(scale):
    """Merging a binary STL's float32 corners on their 32 bits, then scaling, gives the very vertices and faces
    that merging the scaled float64 corners gives (float32 to float64 is exact; IEEE 754)."""
    corners, faces = soup(np.float32)
    merged32, faces32 = _merge_vertices(corners, faces, scale=scale)
    merged64, faces64 = _merge_vertices(corners.astype(np.float64) * scale, faces)
    assert bits(merged32) == bits(merged64)
    assert bits(faces32) == bits(faces64)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_the_merge_keeps_one_vertex_per_distinct_corner(dtype):
    """As many vertices as numpy's np.unique finds distinct corner bit patterns (a reference from numpy itself),
    and every face keeps its corners bit for bit."""
    corners, faces = soup(dtype)
    merged, merged_faces = _merge_vertices(corners, faces)
    distinct = np.unique(corners.view(f"V{3 * corners.itemsize}").ravel())
    assert len(merged) == len(distinct)
    assert bits(merged[merged_faces]) == bits(corners.astype(np.float64)[faces])


@pytest.mark.parametrize("fake_hash", [
    lambda bits: np.zeros(len(bits), np.uint64),  # every corner collides
    lambda bits: (bits[:, 0].astype(np.uint64) & np.uint64(3)) << np.uint64(62),  # a few groups of mixed corners
])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_a_hash_collision_never_merges_different_corners(monkeypatch, fake_hash, dtype):
    """With a hash that makes different corners collide, the merge still gives exactly the normal result."""
    corners, faces = soup(dtype)
    expected = _merge_vertices(corners, faces, scale=2.0)
    monkeypatch.setattr(merge, "_row_hash", fake_hash)
    merged, merged_faces = _merge_vertices(corners, faces, scale=2.0)
    assert bits(merged) == bits(expected[0])
    assert bits(merged_faces) == bits(expected[1])


@pytest.mark.parametrize("key_bits", [12, 60])  # 12 bits pack with the positions; 60 do not and take argsort
def test_the_packed_sort_matches_numpys_stable_argsort(key_bits):
    """Sorted keys and order equal numpy's stable argsort (the reference), ties in their original order."""
    key = np.random.default_rng(3).integers(0, 2**12, 5000).astype(np.int64) << (key_bits - 12)
    expected = np.argsort(key, kind="stable")
    sorted_key, order = _sort_with_order(key.copy(), key_bits)
    assert np.array_equal(order, expected)
    assert np.array_equal(sorted_key, key[expected])


@pytest.mark.parametrize("faces", [
    [[0, 1, 2], [2, 1, 3], [1, 2, 4], [0, 3, 4], [3, 2, 0], [4, 3, 1]],  # edge (1, 2) has three faces, others one
    [[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]],  # a closed tetrahedron: every edge has two
])
def test_the_edge_table_lists_each_edge_as_a_plain_count_does(faces):
    """Each undirected edge's face count, the faces and winding of the edges used twice, and the faces that meet
    along an edge equal a dictionary built face by face (elementary), in the order of the edges' corner pairs."""
    runs: dict[tuple[int, int], list[tuple[int, int]]] = {}
    for f, face in enumerate(faces):
        for j in range(3):
            start, end = face[j], face[(j + 1) % 3]
            runs.setdefault((min(start, end), max(start, end)), []).append((f, start))
    edges = _edge_table(np.array(faces))
    assert {tuple(e): int(c) for e, c in zip(edges.vertices.tolist(), edges.counts)} == \
        {e: len(r) for e, r in runs.items()}
    twice = [runs[e] for e in sorted(runs) if len(runs[e]) == 2]
    assert edges.pair_faces.tolist() == [[r[0][0], r[1][0]] for r in twice]
    assert edges.pair_same.tolist() == [r[0][1] == r[1][1] for r in twice]
    assert edges.links.tolist() == [[r[i][0], r[i + 1][0]] for e in sorted(runs) for r in [runs[e]]
                                    for i in range(len(r) - 1)]

"""Mesh health: merge, degenerate faces, open and over-shared edges, winding, bodies, and the geometry kernel."""

from __future__ import annotations

from dataclasses import dataclass

import manifold3d as m3d
import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order, connected_components

from services.errors import UnusableInput
from services.findings import Finding
from services.intake.common import _compact, _count, _num, _refuse
from services.intake.merge import _blocks, _merge_vertices, _sort_with_order
from services.intake.units import _largest_extent_mm


# Checking overlaps means a boolean union of every body; beyond this many it is skipped and said so.
_OVERLAP_MAX_BODIES = 256


# Faces with area below this fraction of the part's largest extent squared count as zero-area.
_DEGENERATE_REL_AREA = 1e-12


@dataclass(frozen=True, slots=True)
class _Edges:
    """The undirected edges of a face array, and which faces meet along them.

    vertices : (e, 2) int64, each edge's vertex indices, smaller first
    counts : (e,) int64, how many faces use each edge
    pair_faces : (p, 2) int64, the two faces of each edge used exactly twice
    pair_same : (p,) bool, True where both faces run that edge the same way (inconsistent winding)
    links : (k, 2) int64, pairs of faces that share any edge
    """

    vertices: np.ndarray
    counts: np.ndarray
    pair_faces: np.ndarray
    pair_same: np.ndarray
    links: np.ndarray


def _edge_table(faces: np.ndarray) -> _Edges:
    """Return the edge table of a face array; directed edge 3 f + j runs from corner j of face f to corner j + 1."""
    n_vertices = int(faces.max()) + 1
    sorted_key, order = _sort_with_order(_edge_keys(faces, n_vertices), (n_vertices * n_vertices - 1).bit_length())
    repeats = sorted_key[1:] == sorted_key[:-1]
    starts = np.flatnonzero(np.r_[True, ~repeats])
    counts = np.diff(starts, append=len(sorted_key))
    edge_vertices = np.empty((len(starts), 2), np.int64)
    np.divmod(sorted_key[starts], n_vertices, out=(edge_vertices[:, 0], edge_vertices[:, 1]))
    del sorted_key
    two = starts[counts == 2]
    a, b = order[two], order[two + 1]
    start = faces.ravel()
    pair_faces = _face_pairs(a, b)
    # Where no edge has more than two faces, the faces that share an edge are exactly the pairs.
    links = pair_faces if counts.max() <= 2 else _face_pairs(order[:-1][repeats], order[1:][repeats])
    return _Edges(vertices=edge_vertices, counts=counts, pair_faces=pair_faces, pair_same=start[a] == start[b],
                  links=links)


def _edge_keys(faces: np.ndarray, n_vertices: int) -> np.ndarray:
    """Return each directed edge's undirected key, smaller vertex * n_vertices + larger, block by block."""
    key = np.empty(faces.size, np.int64)
    for block in _blocks(len(faces)):
        start, end = faces[block].ravel(), faces[block][:, [1, 2, 0]].ravel()
        key[3 * block.start:3 * block.stop] = np.minimum(start, end) * n_vertices + np.maximum(start, end)
    return key


def _face_pairs(first_edges: np.ndarray, second_edges: np.ndarray) -> np.ndarray:
    """Return the faces of two directed-edge arrays as the columns of one (k, 2) array."""
    pairs = np.empty((len(first_edges), 2), np.int64)
    np.floor_divide(first_edges, 3, out=pairs[:, 0])
    np.floor_divide(second_edges, 3, out=pairs[:, 1])
    return pairs


def _components(n: int, pairs: np.ndarray) -> tuple[int, np.ndarray]:
    """Return the number of connected components of n nodes joined by pairs, and each node's label."""
    graph = coo_matrix((np.ones(len(pairs), np.int8), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    return connected_components(graph, directed=False)


def _drop_degenerate(vertices: np.ndarray, faces: np.ndarray) -> tuple[np.ndarray, int]:
    """Return the faces without zero-area ones (repeated corners or collinear), and how many went."""
    extent = max(_largest_extent_mm(vertices), 1e-300)
    least_twice_area = 2 * _DEGENERATE_REL_AREA * extent**2
    bad = _by_face_blocks(faces, lambda block: _zero_area(vertices, block, least_twice_area), bool)
    if not bad.any():
        return faces, 0
    return faces[~bad], int(bad.sum())


def _zero_area(vertices: np.ndarray, faces: np.ndarray, least_twice_area: float) -> np.ndarray:
    """Return which faces repeat a corner or span less than half of ``least_twice_area``."""
    tri = np.take(vertices, faces, axis=0)  # as vertices[faces], at a third of the time for (n, 3) rows
    cross = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    twice_area = np.sqrt(np.einsum("ij,ij->i", cross, cross))
    repeated = (faces[:, 0] == faces[:, 1]) | (faces[:, 1] == faces[:, 2]) | (faces[:, 2] == faces[:, 0])
    return repeated | (twice_area <= least_twice_area)


def _by_face_blocks(faces: np.ndarray, per_face, dtype) -> np.ndarray:
    """Return ``per_face(block)`` for consecutive blocks of faces (see merge._blocks), joined into one (m,) array."""
    out = np.empty(len(faces), dtype)
    for block in _blocks(len(faces)):
        out[block] = per_face(faces[block])
    return out


def _propagate_parity(pred: np.ndarray, rel: np.ndarray, root: int) -> np.ndarray:
    """Return each node's parity relative to the root of a tree, by pointer jumping (log depth steps)."""
    up = pred.copy()
    up[root] = root
    parity = rel.copy()
    parity[root] = False
    while True:
        next_up = up[up]
        if np.array_equal(next_up, up):
            return parity
        parity = parity ^ parity[up]
        up = next_up


def _fix_winding(faces: np.ndarray, edges: _Edges) -> tuple[np.ndarray, int]:
    """Flip faces so neighbours run shared edges in opposite directions; keep each shell's majority winding."""
    if not edges.pair_same.any():
        return faces, 0
    n = len(faces)
    n_shells, shell = _components(n, edges.pair_faces)
    roots = np.unique(shell, return_index=True)[1]
    # A virtual node n joins one face of every shell so a single breadth-first search reaches all faces.
    a = np.r_[edges.pair_faces[:, 0], np.full(len(roots), n)]
    b = np.r_[edges.pair_faces[:, 1], roots]
    rel = np.r_[edges.pair_same, np.zeros(len(roots), bool)]
    graph = coo_matrix((np.ones(len(a), np.int8), (a, b)), shape=(n + 1, n + 1)).tocsr()
    _, pred = breadth_first_order(graph, n, directed=False, return_predecessors=True)
    key = np.minimum(a, b) * (n + 1) + np.maximum(a, b)
    order = np.argsort(key)
    node = np.arange(n + 1)
    tree_key = np.minimum(node, pred) * (n + 1) + np.maximum(node, pred)
    tree_rel = rel[order[np.clip(np.searchsorted(key[order], tree_key), 0, len(key) - 1)]]
    flip = _propagate_parity(pred, tree_rel, root=n)[:n]
    flips_per_shell = np.bincount(shell, weights=flip, minlength=n_shells)
    flip ^= (2 * flips_per_shell > np.bincount(shell, minlength=n_shells))[shell]
    fixed = faces.copy()
    fixed[flip] = fixed[flip][:, ::-1]
    return fixed, int(flip.sum())


def _signed_volumes(vertices: np.ndarray, faces: np.ndarray, labels: np.ndarray, n: int) -> np.ndarray:
    """Return the signed volume of each labelled body (divergence theorem over its triangles)."""
    centre = np.array([(column.min() + column.max()) / 2 for column in vertices.T])  # centred: an accurate sum
    per_face = _by_face_blocks(faces, lambda block: _cone_volumes(vertices, block, centre), np.float64)
    return np.bincount(labels, weights=per_face, minlength=n)


def _cone_volumes(vertices: np.ndarray, faces: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """Return the signed volume of the tetrahedron each face spans with the centre."""
    tri = np.take(vertices, faces, axis=0) - centre
    return np.einsum("ij,ij->i", tri[:, 0], np.cross(tri[:, 1], tri[:, 2])) / 6.0


@dataclass(frozen=True, slots=True)
class _Health:
    """A repaired mesh and what its examination found."""

    vertices_mm: np.ndarray
    faces: np.ndarray
    bodies: int
    watertight: bool
    volume_mm3: float
    findings: tuple[Finding, ...]


def _mesh_health(vertices: np.ndarray, faces: np.ndarray, *, name: str, scale: float = 1.0) -> _Health:
    """Merge, examine and repair a raw mesh (``scale`` mm per unit), reporting each defect before it is repaired."""
    vertices_mm, faces = _merge_vertices(vertices, faces, scale=scale)
    faces, removed = _drop_degenerate(vertices_mm, faces)
    if len(faces) == 0:
        raise _refuse("no_triangles", name, "every triangle has zero area; export the part again.")
    vertices_mm, faces = _compact(vertices_mm, faces)
    edges = _edge_table(faces)
    findings = _topology_findings(vertices_mm, edges, name=name, removed=removed)
    faces, flipped = _fix_winding(faces, edges)
    n_bodies, body = _components(len(faces), edges.links)  # flipping faces keeps which faces touch
    volumes = _signed_volumes(vertices_mm, faces, body, n_bodies)
    watertight = not bool((edges.counts % 2).any())
    inverted = watertight and bool((volumes < 0).all())
    if inverted:
        faces, volumes = faces[:, ::-1].copy(), -volumes
        # After a winding repair that kept the inward majority, the faces that were really wrong are the rest.
        flipped = len(faces) - flipped if flipped else 0
    findings += _orientation_findings(_edge_table(faces) if flipped else edges, flipped,
                                      inverted=inverted and not flipped, name=name)
    if n_bodies > 1:
        findings.append(Finding("mesh_health", "note", f"{name}: the mesh holds {n_bodies:,} separate bodies; "
                                "check that each is meant (a cavity, or a part printed with the rest).",
                                measured=float(n_bodies), unit="bodies", count=n_bodies))
    # One closed 2-manifold shell (every edge in exactly two faces, wound consistently, enclosing a positive
    # volume) is exactly what the kernel accepts, and one body overlaps nothing: building it would find nothing.
    single_shell = n_bodies == 1 and bool((edges.counts == 2).all()) and float(volumes.sum()) > 0
    if watertight and not single_shell:
        findings += _kernel_findings(vertices_mm, faces, volumes, name=name)
    return _Health(vertices_mm, faces, n_bodies, watertight, float(volumes.sum()), tuple(findings))


def _topology_findings(vertices_mm: np.ndarray, edges: _Edges, *, name: str, removed: int) -> list[Finding]:
    """Return the findings about degenerate faces, open edges and over-shared edges of the raw mesh."""
    findings = []
    if removed:
        findings.append(Finding("mesh_health", "note", f"{name}: {_count(removed, 'zero-area face')} removed.",
                                measured=float(removed), unit="faces", count=removed))
    open_finding = _open_edges_finding(vertices_mm, edges, name=name)
    if open_finding is not None:
        findings.append(open_finding)
    shared = int((edges.counts > 2).sum())
    if shared:
        edges_are = "edge is" if shared == 1 else "edges are"
        findings.append(Finding("mesh_health", "caution", f"{name}: {shared:,} {edges_are} shared by more than two "
                                "faces (bodies touching along an edge); the printer may fuse them or leave them "
                                "barely joined.", measured=float(shared), unit="edges", count=shared))
    return findings


def _open_edges_finding(vertices_mm: np.ndarray, edges: _Edges, *, name: str) -> Finding | None:
    """Return a blocker for edges not closed by a pair of faces, located at the largest hole."""
    is_open = edges.counts % 2 == 1
    n_open = int(is_open.sum())
    if not n_open:
        return None
    ends = edges.vertices[is_open]
    _, vertex_hole = _components(len(vertices_mm), ends)
    _, hole = np.unique(vertex_hole[ends[:, 0]], return_inverse=True)
    biggest = np.bincount(hole).argmax()
    where = vertices_mm[ends[hole == biggest]].mean(axis=(0, 1))
    n_holes = int(hole.max()) + 1
    x, y, z = (round(float(c), 4) for c in where)
    message = (f"{name}: the surface is not closed: {n_open:,} open edges in {n_holes:,} "
               f"{'hole' if n_holes == 1 else 'holes'}, the largest around ({_num(x)}, {_num(y)}, {_num(z)}) mm; "
               "a printer cannot make an open surface, so close the mesh in your CAD program and export it again.")
    return Finding("mesh_health", "blocker", message, measured=float(n_open), limit=0.0, unit="edges",
                   location_mm=(x, y, z), count=n_open)


def _orientation_findings(edges_after: _Edges, flipped: int, *, inverted: bool, name: str) -> list[Finding]:
    """Return notes on repaired winding or an inside-out part, and a caution if faces still disagree."""
    findings = []
    if inverted:
        findings.append(Finding("mesh_health", "note", f"{name}: the part was inside out (every face pointed "
                                "inward); it was turned outside out."))
    if flipped:
        findings.append(Finding("mesh_health", "note", f"{name}: {_count(flipped, 'face')} wound against "
                                "their neighbours; they were flipped to match.", measured=float(flipped),
                                unit="faces", count=flipped))
    left = int(edges_after.pair_same.sum())
    if left:
        joins = "edge still joins" if left == 1 else "edges still join"
        findings.append(Finding("mesh_health", "caution", f"{name}: {left:,} {joins} faces wound against each "
                                "other (a one-sided surface); the inside of the part is ambiguous.",
                                measured=float(left), unit="edges", count=left))
    return findings


_KERNEL_WORDS = {
    "NotManifold": "its surface is not a closed two-manifold",
    "NonFiniteVertex": "a vertex has non-finite coordinates",
    "VertexOutOfBounds": "a face refers to a missing vertex",
}


def _kernel(result: m3d.Manifold, *, name: str) -> m3d.Manifold:
    """Return a manifold3d result, or raise our own error when its status is not NoError."""
    status = result.status()
    if status == m3d.Error.NoError:
        return result
    words = _KERNEL_WORDS.get(status.name, f"it reports {status.name}")
    raise _refuse(f"kernel_{status.name.lower()}", name, f"the geometry kernel could not build a solid from the "
                  f"mesh ({words}); the printed shape may differ from the file, so repair the mesh and export "
                  "it again.")


def _kernel_findings(vertices_mm: np.ndarray, faces: np.ndarray, volumes: np.ndarray, *, name: str) -> list[Finding]:
    """Return what manifold3d reports about a closed mesh: a failed build or overlapping bodies."""
    try:
        mesh = m3d.Mesh64(vert_properties=np.ascontiguousarray(vertices_mm, np.float64),
                          tri_verts=np.ascontiguousarray(faces, np.uint64))
        solid = _kernel(m3d.Manifold(mesh), name=name)
        if len(volumes) < 2 or (volumes <= 0).any():
            return []  # one body cannot overlap another; a cavity shell is not a body to unite
        if len(volumes) > _OVERLAP_MAX_BODIES:
            return [Finding("mesh_health", "note", f"{name}: with {len(volumes):,} bodies, overlaps between "
                            "bodies were not checked.")]
        return _overlap_findings(solid, name=name)
    except UnusableInput as exc:
        return [Finding("mesh_health", "caution", exc.message)]


def _overlap_findings(solid: m3d.Manifold, *, name: str) -> list[Finding]:
    """Return a caution when bodies intersect one another (their union is smaller than their sum)."""
    pieces = [_kernel(piece, name=name) for piece in solid.decompose()]
    union = _kernel(m3d.Manifold.batch_boolean(pieces, m3d.OpType.Add), name=name).volume()
    summed = sum(piece.volume() for piece in pieces)
    overlap = summed - union
    if overlap <= 1e-9 * summed:
        return []
    return [Finding("mesh_health", "caution", f"{name}: bodies intersect one another: they add up to "
                    f"{_num(summed)} mm3 but their union is {_num(union)} mm3; unite them in your CAD program so "
                    "the volume and the quote are right.", measured=overlap, unit="mm3")]

"""Merging a triangle soup's repeated corners exactly, and the fast key sort it and the edge table share.

numpy's plain sort of 64-bit integers is vectorised and several times faster than its argsort, so a key
and its position are packed into one 64-bit word and sorted together wherever they fit.
"""

from __future__ import annotations

import numpy as np


# Odd 64-bit multipliers (from the splitmix64 and xxhash families) that spread every input bit upwards.
_MIX = (np.uint64(0x9E3779B97F4A7C15), np.uint64(0xBF58476D1CE4E5B9), np.uint64(0x94D049BB133111EB))


# Rows per block where elementwise work runs block by block: a block's temporaries stay in memory the allocator
# reuses, where whole-array temporaries would take fresh pages, whose faults cost this machine more than the work.
_BLOCK_ROWS = 1 << 16


def _blocks(n: int):
    """Yield the slices that cover range(n) in blocks of _BLOCK_ROWS."""
    for start in range(0, n, _BLOCK_ROWS):
        yield slice(start, min(start + _BLOCK_ROWS, n))


def _sort_with_order(key: np.ndarray, key_bits: int) -> tuple[np.ndarray, np.ndarray]:
    """Return the keys sorted and the stable order that sorts them; the key array itself is used up.

    key : (n,) int64 or uint64, non-negative and below 2**key_bits
    Returns (sorted key (n,) int64, order (n,) int64), as ``key[o], o`` with ``o = argsort(key, kind="stable")``.
    """
    n = len(key)
    index_bits = max(1, (n - 1).bit_length())
    if key_bits + index_bits > 64:  # too wide to pack with the position
        order = np.argsort(key, kind="stable")
        return key[order].astype(np.int64), order
    packed = key.view(np.uint64)
    packed <<= np.uint64(index_bits)
    for block in _blocks(n):
        packed[block] |= np.arange(block.start, block.stop, dtype=np.uint64)
    packed.sort()
    order = (packed & np.uint64((1 << index_bits) - 1)).view(np.int64)
    packed >>= np.uint64(index_bits)
    return packed.view(np.int64), order


def _row_hash(bits: np.ndarray) -> np.ndarray:
    """Return a 64-bit hash of each row of an (n, k) unsigned array whose high bits depend on every bit of the row."""
    h = np.empty(len(bits), np.uint64)
    for block in _blocks(len(bits)):
        part = np.zeros(block.stop - block.start, np.uint64)
        for column, mix in zip(bits[block].T, _MIX):
            part ^= column
            part *= mix
            part ^= part >> np.uint64(31)
        part *= _MIX[0]
        h[block] = part
    return h


def _group_rows(bits: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return a group number for each row of an (n, k) unsigned array, equal exactly when the rows are equal,
    and a row of each group.

    Rows are sorted by the high bits of their hash; neighbours with equal hashes are then compared bit by bit,
    and a hash shared by different rows is split by an exact sort of just those rows.
    """
    n = len(bits)
    index_bits = max(1, (n - 1).bit_length())
    key = _row_hash(bits)
    key >>= np.uint64(index_bits)
    key, order = _sort_with_order(key, 64 - index_bits)
    same = key[1:] == key[:-1]
    del key
    collided = same & _neighbours_differ(bits, order)
    sorted_group = np.empty(n, np.int64)
    sorted_group[0] = 0
    np.cumsum(~same, out=sorted_group[1:])
    if collided.any():
        sorted_group = _split_collisions(bits, order, sorted_group, collided)
    group = np.empty(n, np.int64)
    group[order] = sorted_group
    first = np.empty(int(sorted_group.max()) + 1, np.int64)
    first[sorted_group] = order  # any row of a group will do: they are bit-identical
    return group, first


def _neighbours_differ(bits: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Return, for each (x, y, z) row in sorted order but the last, whether its bits differ from the next row's."""
    differs = np.empty(len(order) - 1, bool)
    for block in _blocks(len(order) - 1):
        ordered = np.take(bits, order[block.start:block.stop + 1], axis=0)
        unequal = ordered[1:] != ordered[:-1]
        differs[block] = unequal[:, 0] | unequal[:, 1] | unequal[:, 2]  # faster than .any(axis=1) on 3 columns
    return differs


def _split_collisions(bits: np.ndarray, order: np.ndarray, sorted_group: np.ndarray,
                      collided: np.ndarray) -> np.ndarray:
    """Return the groups with every hash group that holds different rows split by an exact sort of its rows.

    The part of such a group that holds its first row keeps the group's number; the other parts get new ones.
    """
    n_groups = int(sorted_group[-1]) + 1
    is_mixed = np.zeros(n_groups, bool)
    is_mixed[sorted_group[1:][collided]] = True
    mixed = np.flatnonzero(is_mixed[sorted_group])  # the positions of those groups, each group's run in a row
    _, sub = np.unique(np.take(bits, order[mixed], axis=0), axis=0, return_inverse=True)
    sub = sub.ravel()
    mixed_group = sorted_group[mixed]
    head = np.r_[True, mixed_group[1:] != mixed_group[:-1]]
    number = np.full(int(sub.max()) + 1, -1, np.int64)
    number[sub[head]] = mixed_group[head]
    rest = number < 0
    number[rest] = n_groups + np.arange(int(rest.sum()))
    split = sorted_group.copy()
    split[mixed] = number[sub]
    return split


def _hash_order(vertices: np.ndarray) -> np.ndarray:
    """Return the order in which merged vertices are listed: by a 64-bit hash of their float64 bits.

    Earlier versions sorted every corner by this hash, so parts read before and after keep their vertex order;
    when two different vertices share the hash, they are listed in coordinate order instead.
    """
    bits = np.ascontiguousarray(vertices, dtype=np.float64).view(np.uint64).reshape(len(vertices), -1)
    mixed = bits * np.array([0x9E3779B97F4A7C15, 0xC2B2AE3D27D4EB4F, 0x165667B19E3779F9], np.uint64)[:bits.shape[1]]
    key = mixed[:, 0] ^ (mixed[:, 1] >> np.uint64(7)) ^ (mixed[:, 2] >> np.uint64(13))
    order = np.argsort(key)
    if np.any(key[order][1:] == key[order][:-1]):
        order = np.lexsort(vertices.T[::-1])
    return order


def _merge_vertices(vertices: np.ndarray, faces: np.ndarray, *, scale: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Merge bit-identical corners (STL repeats every corner once per facet) and return them in millimetres.

    vertices : (n, 3) float32 (a binary STL's corners, in the file's unit) or float64; scale : mm per unit
    Returns (vertices_mm (k, 3) float64, faces (m, 3) int64 indexing them).
    float32 corners are merged before scaling: float32 to float64 is exact and a positive scale cannot round two
    float32 values to one float64, so the result is the same as merging the scaled corners, at half the bits.
    float64 corners are scaled first, since scaling may round two nearby values to one.
    """
    if vertices.dtype != np.float32 and scale != 1.0:
        vertices, scale = vertices * scale, 1.0
    group, first = _group_rows(vertices.view(np.uint32 if vertices.dtype == np.float32 else np.uint64))
    merged = np.take(vertices, first, axis=0).astype(np.float64)
    if scale != 1.0:
        merged *= scale
    order = _hash_order(merged)
    position = np.empty(len(order), np.int64)
    position[order] = np.arange(len(order))
    for block in _blocks(len(group)):
        group[block] = position[group[block]]
    return np.take(merged, order, axis=0), group[faces]

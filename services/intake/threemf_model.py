"""Read a 3MF model document in one streaming pass, counting and capping before anything is expanded.

A 3MF object is a mesh or a list of components (other objects, each with a transform); build items
place objects. A few kilobytes of components can ask for millions of triangles, or loop forever, so
the reader first records every object unexpanded, then refuses missing references, cycles, deep
nesting and too many triangles from the counts alone, and only then expands: once per distinct
(parent, child) edge, with numpy, so the time grows with what is produced and nothing else.
Transforms follow the 3MF core specification (from memory): a point is a row vector, p' = [p 1] M,
with M's last column 0 0 0 1 left out of the attribute.
"""

from __future__ import annotations

from array import array
from dataclasses import dataclass

import numpy as np
from lxml import etree

from services.errors import UnusableInput


# The same lxml options trimesh uses for 3MF: no entities, no DTD, no network, no huge trees.
XML_OPTIONS = {"resolve_entities": False, "no_network": True, "load_dtd": False, "huge_tree": False}
# One sentence wherever the parser gives up: which read meets the depth limit first (the unit probe or the
# model reader) depends on the libxml2 build's buffering, and the user needs the same answer either way.
MALFORMED_XML = ("the 3MF model is not well-formed XML (or nests deeper than an XML parser allows); export the part "
                 "again.")
_PATH_ATTR = "{http://schemas.microsoft.com/3dmanufacturing/production/2015/06}path"


@dataclass(frozen=True, slots=True)
class ComponentLimits:
    """Caps on a 3MF's component graph, checked before any component is expanded."""

    max_components: int = 100_000
    max_depth: int = 16
    max_instances: int = 1_000_000
    max_triangles: int = 5_000_000


@dataclass(frozen=True, slots=True)
class _Object:
    """One 3MF object as read: slices of the reader's vertex, triangle and component arrays."""

    vertex_start: int
    vertex_end: int
    triangle_start: int
    triangle_end: int
    component_start: int
    component_end: int


def _refuse(code: str, name: str, text: str) -> UnusableInput:
    return UnusableInput(code, f"{name}: {text}")


_IDENTITY = (1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0)


def _transform(text: str | None, *, name: str) -> tuple[float, ...]:
    """Return the twelve numbers of a 3MF transform attribute, m00 m01 m02 ... m30 m31 m32."""
    if text is None:
        return _IDENTITY
    values = text.split()
    try:
        if len(values) == 12:
            return tuple(float(v) for v in values)
    except ValueError:
        pass
    raise _refuse("xml_malformed", name, f"the 3MF transform '{text[:60]}' is not twelve numbers; export the "
                  "part again.")


def _homogeneous(flat: np.ndarray) -> np.ndarray:
    """Return (k, 4, 4) matrices from (k * 12,) transform numbers: rows m0 m1 m2 m3, last column 0 0 0 1."""
    k = len(flat) // 12
    out = np.zeros((k, 4, 4))
    out[:, :, :3] = flat.reshape(k, 4, 3)
    out[:, 3, 3] = 1.0
    return out


class _Reader:
    """The streaming pass: vertices, triangles and components into flat arrays, objects and items unexpanded."""

    def __init__(self, *, name: str, limits: ComponentLimits) -> None:
        self.name, self.limits = name, limits
        self.vertices, self.triangles, self.transforms = array("d"), array("q"), array("d")
        self.children: list[str] = []
        self.objects: dict[str, _Object] = {}
        self.items: list[tuple[str, tuple[float, ...]]] = []
        self.marks = (0, 0, 0)

    def vertex(self, el) -> None:
        self.vertices.extend((float(el.get("x")), float(el.get("y")), float(el.get("z"))))

    def triangle(self, el) -> None:
        self.triangles.extend((int(el.get("v1")), int(el.get("v2")), int(el.get("v3"))))
        # A safety net while streaming; the exact count of what the build uses is refused after the pass.
        if len(self.triangles) > 6 * self.limits.max_triangles:
            raise _refuse("too_many_triangles", self.name, f"the 3MF model holds more than "
                          f"{2 * self.limits.max_triangles:,} triangles, more than the {self.limits.max_triangles:,} "
                          "allowed; export it with a coarser tessellation.")

    def component(self, el) -> None:
        if len(self.children) >= self.limits.max_components:
            raise _refuse("3mf_too_many_components", self.name, f"the 3MF model holds more than "
                          f"{self.limits.max_components:,} components, the most allowed; merge repeated parts into "
                          "one mesh before exporting.")
        path = el.get(_PATH_ATTR)
        if path and path.lstrip("/").lower() != "3d/3dmodel.model":
            raise _refuse("3mf_external_part", self.name, f"a 3MF component refers to another model part "
                          f"('{path[:60]}'), which we do not read; export the assembly as one model.")
        self.children.append(el.get("objectid", ""))
        self.transforms.extend(_transform(el.get("transform"), name=self.name))

    def object(self, el) -> None:
        object_id = el.get("id", "")
        if object_id in self.objects:
            raise _refuse("xml_malformed", self.name, f"the 3MF model defines object {object_id[:20]!r} twice; "
                          "export the part again.")
        ends = (len(self.vertices) // 3, len(self.triangles) // 3, len(self.children))
        (v0, t0, c0), (v1, t1, c1) = self.marks, ends
        self.objects[object_id] = _Object(v0, v1, t0, t1, c0, c1)
        self.marks = ends

    def item(self, el) -> None:
        self.items.append((el.get("objectid", ""), _transform(el.get("transform"), name=self.name)))

    def children_of(self, key: str) -> list[str]:
        obj = self.objects[key]
        return self.children[obj.component_start:obj.component_end]


def read_model(stream, *, name: str, limits: ComponentLimits = ComponentLimits()) -> tuple[np.ndarray, np.ndarray]:
    """Return the vertices (n, 3) float64 and faces (m, 3) int64 of every build item, expanded."""
    reader = _Reader(name=name, limits=limits)
    handlers = {"vertex": reader.vertex, "triangle": reader.triangle, "component": reader.component,
                "object": reader.object, "item": reader.item}
    try:
        for _, el in etree.iterparse(stream, events=("end",), **XML_OPTIONS):
            handler = handlers.get(el.tag.rpartition("}")[2]) if isinstance(el.tag, str) else None
            if handler is not None:
                handler(el)
                el.clear()
                while el.getprevious() is not None:  # drop read siblings: memory stays flat
                    del el.getparent()[0]
    except etree.XMLSyntaxError as exc:
        raise _refuse("xml_malformed", name, MALFORMED_XML) from exc
    except (TypeError, ValueError) as exc:
        raise _refuse("xml_malformed", name, "a 3MF vertex or triangle lacks a number where one belongs; export "
                      "the part again.") from exc
    return _expand(reader, name=name, limits=limits)


def _graph_order(reader: _Reader, *, name: str) -> list[str]:
    """Return the objects the build reaches, parents before children; refuse missing ones and cycles."""
    objects, order, state = reader.objects, [], {}
    for root, _ in reader.items:
        if root not in objects:
            raise _refuse("3mf_missing_object", name, f"a 3MF build item refers to object {root[:20]!r}, which the "
                          "model does not define; export the part again.")
        if root in state:
            continue  # a second build item of the same object: its graph is already ordered
        stack = [(root, iter(reader.children_of(root)))]
        state[root] = "open"
        while stack:
            node, children = stack[-1]
            child = next(children, None)
            if child is None:
                state[node] = "done"
                order.append(node)
                stack.pop()
            elif child not in objects:
                raise _refuse("3mf_missing_object", name, f"3MF object {node[:20]!r} uses object {child[:20]!r} "
                              "as a component, which the model does not define; export the part again.")
            elif state.get(child) == "open":
                raise _refuse("3mf_component_cycle", name, f"3MF object {child[:20]!r} contains itself through "
                              "its components (a cycle), so it has no finite shape; export the part again.")
            elif child not in state:
                state[child] = "open"
                stack.append((child, iter(reader.children_of(child))))
    return order[::-1]


def _counts(reader: _Reader, order: list[str], *, name: str, limits: ComponentLimits) -> None:
    """Refuse, from counts alone, a graph too deep or that would expand to too many instances or triangles."""
    depth, instances, triangles = {}, {}, {}
    for key in reversed(order):  # children first
        obj, children = reader.objects[key], reader.children_of(key)
        depth[key] = 1 + max((depth[c] for c in children), default=-1)
        instances[key] = 1 + sum(instances[c] for c in children)
        triangles[key] = obj.triangle_end - obj.triangle_start + sum(triangles[c] for c in children)
    deepest = max((depth[k] for k, _ in reader.items), default=0)
    if deepest > limits.max_depth:
        raise _refuse("3mf_too_deep", name, f"the 3MF components nest {deepest:,} levels deep, more than the "
                      f"{limits.max_depth} allowed; flatten the assembly before exporting.")
    total = sum(triangles[k] for k, _ in reader.items)
    if total > limits.max_triangles:
        raise _refuse("too_many_triangles", name, f"the 3MF build would expand to {total:,} triangles, "
                      f"more than the {limits.max_triangles:,} allowed; export it with a coarser tessellation.")
    placed = sum(instances[k] for k, _ in reader.items)
    if placed > limits.max_instances:
        raise _refuse("3mf_too_many_components", name, f"the 3MF components would place {placed:,} objects, more "
                      f"than the {limits.max_instances:,} allowed; merge repeated parts into one mesh.")


def _placements(reader: _Reader, order: list[str]) -> dict[str, np.ndarray]:
    """Return every object's world transforms (k, 4, 4), pushed down the graph one parent at a time."""
    world: dict[str, list[np.ndarray]] = {}
    for key, numbers in reader.items:
        world.setdefault(key, []).append(_homogeneous(np.asarray(numbers)))
    all_children = np.asarray(reader.children)
    all_local = _homogeneous(np.frombuffer(reader.transforms, np.float64))
    placed = {}
    for key in order:
        mats = np.concatenate(world.pop(key))
        placed[key] = mats
        obj = reader.objects[key]
        if obj.component_end == obj.component_start:
            continue
        children = all_children[obj.component_start:obj.component_end]
        local = all_local[obj.component_start:obj.component_end]
        # The component's transform applies first: [p 1] C W, for every (parent placement, component) pair.
        composed = np.matmul(local[None], mats[:, None])
        # Group the components by child with one sort: a mask per child would be quadratic in their number.
        by_child = np.argsort(children, kind="stable")
        names, starts = np.unique(children[by_child], return_index=True)
        for child, group in zip(names, np.split(by_child, starts[1:])):
            world.setdefault(str(child), []).append(composed[:, group].reshape(-1, 4, 4))
    return placed


def _expand(reader: _Reader, *, name: str, limits: ComponentLimits) -> tuple[np.ndarray, np.ndarray]:
    """Return the triangle mesh of every placed object's own mesh, in world coordinates."""
    order = _graph_order(reader, name=name)
    _counts(reader, order, name=name, limits=limits)
    vertices = np.frombuffer(reader.vertices, np.float64).reshape(-1, 3)
    triangles = np.frombuffer(reader.triangles, np.int64).reshape(-1, 3)
    out_v, out_f, offset = [], [], 0
    for key, mats in _placements(reader, order).items():
        obj = reader.objects[key]
        v = vertices[obj.vertex_start:obj.vertex_end]
        f = triangles[obj.triangle_start:obj.triangle_end]
        if not len(f):
            continue
        if f.min() < 0 or f.max() >= len(v):
            raise _refuse("bad_faces", name, "some faces refer to vertices the file does not hold; export the "
                          "part again.")
        placed = np.einsum("nj,kji->kni", v, mats[:, :3, :3]) + mats[:, None, 3, :3]
        out_v.append(placed.reshape(-1, 3))
        out_f.append((f[None] + (offset + len(v) * np.arange(len(mats)))[:, None, None]).reshape(-1, 3))
        offset += len(v) * len(mats)
    if not out_f:
        return np.empty((0, 3)), np.empty((0, 3), np.int64)
    return np.concatenate(out_v), np.concatenate(out_f)

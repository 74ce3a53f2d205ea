// The report's 3D view: the part as designed (decimated by the worker) or as printed (the outlines of its
// layer runs), numbered finding markers that jump to their finding, and a layer slider that cuts the part
// at a layer and shows that layer's problems. Data: part-view.json, written by services/part_view.py.
import * as THREE from "three";
import { OrbitControls } from "three/addons/controls/OrbitControls.js";

const root = document.getElementById("part-view");
const stage = root.querySelector(".pv-stage");
const status = root.querySelector(".pv-status");
window.phasewrightPartView = "loading";

function decode(text, Type) {
  const bin = atob(text);
  const bytes = new Uint8Array(bin.length);
  for (let i = 0; i < bin.length; i++) bytes[i] = bin.charCodeAt(i);
  return new Type(bytes.buffer);
}

function say(text) { status.textContent = text; }

fetch(root.dataset.src, { credentials: "same-origin" })
  .then((r) => { if (!r.ok) throw new Error(`the view's data answered ${r.status}`); return r.json(); })
  .then(build)
  .catch((err) => { window.phasewrightPartView = "failed"; say(`The 3D view could not be shown: ${err.message}.`); });

function build(view) {
  let renderer;
  try {
    renderer = new THREE.WebGLRenderer({ antialias: true, preserveDrawingBuffer: true });
  } catch (err) {
    window.phasewrightPartView = "failed";
    say("This browser cannot draw the 3D view (WebGL is off or missing); the pictures below show the same findings.");
    return;
  }
  const width = () => stage.clientWidth || 640;
  const height = () => Math.round(Math.min(520, Math.max(320, width() * 0.6)));
  renderer.setPixelRatio(window.devicePixelRatio || 1);
  renderer.setSize(width(), height());
  renderer.localClippingEnabled = true;
  renderer.setClearColor(0xf7f6f1);
  stage.prepend(renderer.domElement);
  renderer.domElement.setAttribute("aria-label", "3D view of the part; drag to turn, scroll to zoom, right-drag to pan");
  renderer.domElement.setAttribute("role", "img");

  const [lo, hi] = view.bounds_mm;
  const centre = new THREE.Vector3((lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2, (lo[2] + hi[2]) / 2);
  const size = Math.max(hi[0] - lo[0], hi[1] - lo[1], hi[2] - lo[2]) || 1;

  const scene = new THREE.Scene();
  const camera = new THREE.PerspectiveCamera(35, width() / height(), size / 100, size * 50);
  camera.up.set(0, 0, 1); // +z is the build direction, as in every other picture of the report
  camera.position.set(centre.x + size * 1.4, centre.y - size * 1.9, centre.z + size * 1.2);
  scene.add(new THREE.HemisphereLight(0xffffff, 0x8090a0, 1.6));
  const sun = new THREE.DirectionalLight(0xffffff, 1.4);
  sun.position.set(size, -size, size * 2);
  scene.add(sun);

  // The build plate, a little larger than the part, so "down" is never in doubt.
  const plate = new THREE.Mesh(new THREE.PlaneGeometry((hi[0] - lo[0]) * 1.3 + size * 0.1, (hi[1] - lo[1]) * 1.3 + size * 0.1),
    new THREE.MeshBasicMaterial({ color: 0xd8d5ca, side: THREE.DoubleSide }));
  plate.position.set(centre.x, centre.y, lo[2] - size * 0.002);
  scene.add(plate);

  const cut = new THREE.Plane(new THREE.Vector3(0, 0, -1), hi[2] + 1);
  const geometry = new THREE.BufferGeometry();
  geometry.setAttribute("position", new THREE.BufferAttribute(decode(view.mesh.positions, Float32Array), 3));
  geometry.setIndex(new THREE.BufferAttribute(decode(view.mesh.indices, Uint32Array), 1));
  geometry.computeVertexNormals();
  const designed = new THREE.Mesh(geometry, new THREE.MeshStandardMaterial({
    color: 0x6f9ea1, roughness: 0.55, metalness: 0.0, side: THREE.DoubleSide, clippingPlanes: [cut] }));
  scene.add(designed);

  const layers = view.layers;
  const zTop = (k) => layers.z0_mm + (k + 1) * layers.height_mm;
  const zBottom = (k) => layers.z0_mm + k * layers.height_mm;
  const lineQuiet = new THREE.LineBasicMaterial({ color: 0x2b3548 });
  const lineNow = new THREE.LineBasicMaterial({ color: 0xc0392b });
  const printed = new THREE.Group();
  const runs = layers.runs.map((run) => {
    const lines = [];
    for (const text of run.loops) {
      const xy = decode(text, Float32Array);
      for (const z of [zBottom(run.first), zTop(run.last)]) {
        const pts = new Float32Array((xy.length / 2) * 3);
        for (let i = 0, j = 0; i < xy.length; i += 2, j += 3) { pts[j] = xy[i]; pts[j + 1] = xy[i + 1]; pts[j + 2] = z; }
        const g = new THREE.BufferGeometry();
        g.setAttribute("position", new THREE.BufferAttribute(pts, 3));
        const line = new THREE.LineLoop(g, lineQuiet);
        printed.add(line);
        lines.push(line);
      }
    }
    return { first: run.first, last: run.last, lines };
  });
  printed.visible = false;
  scene.add(printed);

  const controls = new OrbitControls(camera, renderer.domElement);
  controls.target.copy(centre);
  controls.update();

  // Markers are HTML links over the canvas (keyboard-reachable, readable by screen readers), placed each frame.
  const overlay = root.querySelector(".pv-markers");
  const markers = view.markers.map((m) => {
    const a = document.createElement("a");
    a.href = `#finding-${m.number}`;
    a.className = `pv-marker mark-${m.severity}`;
    a.textContent = m.numbers.join(", ");
    a.title = `Finding${m.numbers.length > 1 ? "s" : ""} ${m.numbers.join(", ")} (worst: ${m.severity}): ${m.message}`;
    a.setAttribute("aria-label", a.title);
    a.addEventListener("click", () => {
      const target = document.getElementById(`finding-${m.number}`);
      if (target) { target.classList.add("flash-target"); setTimeout(() => target.classList.remove("flash-target"), 1600); }
    });
    overlay.appendChild(a);
    return { data: m, el: a, at: new THREE.Vector3(...m.location_mm) };
  });

  const slider = root.querySelector(".pv-layer");
  const layerText = root.querySelector(".pv-layer-text");
  const mode = root.querySelectorAll("input[name=pv-mode]");
  slider.max = String(layers.count - 1);
  slider.value = String(layers.count - 1);

  function layerNow() { return Number(slider.value); }

  function place() {
    const k = layerNow();
    const w = renderer.domElement.clientWidth, h = renderer.domElement.clientHeight;
    for (const m of markers) {
      const shownByLayer = !m.data.layers || m.data.layers[0] <= k;
      const p = m.at.clone().project(camera);
      const visible = shownByLayer && p.z < 1 && Math.abs(p.x) <= 1.05 && Math.abs(p.y) <= 1.05;
      m.el.hidden = !visible;
      if (visible) {
        m.el.style.left = `${((p.x + 1) / 2) * w}px`;
        m.el.style.top = `${((1 - p.y) / 2) * h}px`;
        const onLayer = m.data.layers && m.data.layers[0] <= k && k <= m.data.layers[1];
        m.el.classList.toggle("on-layer", Boolean(onLayer));
      }
    }
  }

  // "show" links in the findings and their instance tables: cut at the instance's layer, turn about it, ring it.
  const ring = document.createElement("div");
  ring.className = "pv-focus";
  ring.hidden = true;
  overlay.appendChild(ring);
  let focus = null;
  document.querySelectorAll(".pv-show").forEach(function (a) {
    a.addEventListener("click", function () {
      focus = new THREE.Vector3(...a.dataset.showAt.split(",").map(Number));
      if (a.dataset.showLayer !== "") slider.value = a.dataset.showLayer;
      controls.target.copy(focus);
      controls.update();
      applyLayer();
    });
  });

  function placeRing() {
    if (!focus) return;
    const p = focus.clone().project(camera);
    ring.hidden = !(p.z < 1 && Math.abs(p.x) <= 1 && Math.abs(p.y) <= 1);
    ring.style.left = `${((p.x + 1) / 2) * renderer.domElement.clientWidth}px`;
    ring.style.top = `${((1 - p.y) / 2) * renderer.domElement.clientHeight}px`;
  }

  function render() { renderer.render(scene, camera); place(); placeRing(); }

  function applyLayer() {
    const k = layerNow();
    cut.constant = zTop(k) + 1e-6;
    for (const run of runs) {
      const shown = run.first <= k;
      for (const line of run.lines) {
        line.visible = shown;
        line.material = run.first <= k && k <= run.last ? lineNow : lineQuiet;
      }
    }
    const here = view.markers.filter((m) => m.layers && m.layers[0] <= k && k <= m.layers[1]).flatMap((m) => m.numbers);
    layerText.textContent = `Layer ${k + 1} of ${layers.count} (top at z = ${zTop(k).toFixed(2)} mm)` +
      (here.length ? `; findings on this layer: ${here.join(", ")}` : "; no located finding on this layer");
    render();
  }

  for (const radio of mode) {
    radio.addEventListener("change", () => {
      const asPrinted = root.querySelector("input[name=pv-mode]:checked").value === "printed";
      designed.visible = !asPrinted;
      printed.visible = asPrinted;
      render();
    });
  }
  slider.addEventListener("input", applyLayer);
  controls.addEventListener("change", render);
  window.addEventListener("resize", () => {
    renderer.setSize(width(), height());
    camera.aspect = width() / height();
    camera.updateProjectionMatrix();
    render();
  });
  applyLayer();
  say(`${view.mesh.triangles.toLocaleString()} of ${view.mesh.source_triangles.toLocaleString()} triangles shown` +
      (layers.every > 1 ? `; as printed: one run of layers in ${layers.every}` : "") + ".");
  window.phasewrightPartView = "ready";
}

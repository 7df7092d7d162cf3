// StackBuild viewer. Four planes side by side: the three voxel-axis planes through a shared cursor and one plane at
// any angle. The server does all reslicing; each image on the page has a loader that keeps at most one request in
// flight (the newest wanted state goes out when the previous answer is in; states in between are skipped). The
// whole view lives in the page address after '#', so it can be bookmarked.
"use strict";

const $ = (id) => document.getElementById(id);
const fmt = (v, digits) => (Object.is(v, -0) ? 0 : v).toFixed(digits);
// Numbers in addresses and requests: short, and free of float noise.
const num = (v) => String(Number((Object.is(v, -0) ? 0 : v).toFixed(6)));

// The four tiles. axis: the voxel axis a plane is normal to (i = 0, j = 1, k = 2); the oblique plane has none.
const TILES = [
  { id: "section", name: "Section plane", axis: 2, key: "1" },
  { id: "ik", name: "Across sections, i–k", axis: 1, key: "2" },
  { id: "jk", name: "Across sections, j–k", axis: 0, key: "3" },
  { id: "oblique", name: "Oblique", axis: null, key: "4" },
];
const HUES = [["amber", 32], ["green", 130], ["cyan", 188], ["blue", 222], ["magenta", 300], ["red", 0]];

const view = {
  info: null,
  tiles: {},         // id → { el, img, loader, geometry, layers: [{ img, loader }] }
  cursor: [0, 0, 0], // voxel indices of the main volume (whole numbers)
  active: "section",
  layers: [],        // per overlay: { on, style, opacity, low, high, hue }
  probe: { seq: 0, shown: 0, asked: null },
};

// ---- loaders: one request in flight per image ----

function makeLoader(img, url, onShown) {
  const loader = { img, url, wanted: null, inFlight: null, shown: null, objectUrl: null, onShown };
  loader.want = (query) => {
    loader.wanted = query;
    img.dataset.wanted = query;
    pump(loader);
  };
  return loader;
}

async function pump(loader) {
  if (loader.inFlight !== null || loader.wanted === loader.shown || loader.wanted === null) return;
  const query = loader.wanted;
  loader.inFlight = query;
  try {
    const response = await fetch(loader.url + "?" + query);
    if (!response.ok) {
      setState((await response.text()).trim(), true);
    } else {
      const header = response.headers.get("X-Plane");
      const url = URL.createObjectURL(await response.blob());
      loader.img.src = url;
      await loader.img.decode();
      if (loader.objectUrl) URL.revokeObjectURL(loader.objectUrl);
      loader.objectUrl = url;
      loader.shown = query;
      loader.img.dataset.shown = query;
      if (loader.onShown) loader.onShown(header ? JSON.parse(header) : null);
    }
  } catch (e) {
    setState("no answer from the viewer: " + e.message, true);
  } finally {
    loader.inFlight = null;
    if (loader.wanted !== query) pump(loader);
  }
}

function setState(text, problem = false) {
  const el = $("state");
  el.textContent = text;
  el.classList.toggle("problem", problem);
}

// ---- geometry helpers ----

const dot = (a, b) => a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
const sub = (a, b) => [a[0] - b[0], a[1] - b[1], a[2] - b[2]];
const cross = (a, b) => [a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]];

function apply(m, x, y) {
  return [0, 1, 2].map((r) => m[r][0] * x + m[r][1] * y + m[r][2]);
}

function voxelToMm(v) {
  const a = view.info.affine;
  return [0, 1, 2].map((r) => a[r][0] * v[0] + a[r][1] * v[1] + a[r][2] * v[2] + a[r][3]);
}

// Where a world point falls on a shown plane: pixel (x, y) and its distance (mm) from the plane.
function mmToPixel(g, mm) {
  const origin = apply(g.pixelToWorldMm, 0, 0);
  const d = sub(mm, origin);
  const normal = cross(g.rightDirection, g.downDirection);
  return { x: dot(d, g.rightDirection) / g.pixelSizeMm, y: dot(d, g.downDirection) / g.pixelSizeMm, off: dot(d, normal) };
}

// The depth (mm) that puts an untilted voxel-axis plane through the cursor's voxel.
function axisDepth(tileId) {
  const p = view.info.axisPlanes.find((a) => a.plane === tileId);
  return dot(sub(voxelToMm(view.cursor), p.centreMm), p.depthDirection);
}

function clampCursor(v) {
  return v.map((x, a) => Math.min(view.info.dims[a] - 1, Math.max(0, Math.round(x))));
}

// ---- what each tile asks for ----

function windowQuery(p) {
  p.set("low", num($("low-number").valueAsNumber));
  p.set("high", num($("high-number").valueAsNumber));
  p.set("sampling", $("nearest").checked ? "nearest" : "linear");
}

function planeQuery(tileId) {
  const p = new URLSearchParams();
  if (tileId === "oblique") {
    p.set("plane", $("orientation").value);
    p.set("tiltH", num($("tiltH-number").valueAsNumber || 0));
    p.set("tiltV", num($("tiltV-number").valueAsNumber || 0));
    p.set("depth", num($("depth-number").valueAsNumber || 0));
  } else {
    p.set("plane", tileId);
    p.set("tiltH", "0");
    p.set("tiltV", "0");
    p.set("depth", num(axisDepth(tileId)));
  }
  windowQuery(p);
  return p;
}

function layerQuery(tileId, n) {
  const L = view.layers[n];
  const p = planeQuery(tileId);
  p.set("low", num(L.low));
  p.set("high", num(L.high));
  p.set("layer", String(n));
  p.set("style", L.style);
  p.set("hue", String(L.hue));
  return p.toString();
}

function render() {
  for (const t of TILES) {
    const tile = view.tiles[t.id];
    tile.loader.want(planeQuery(t.id).toString());
    tile.layers.forEach((layer, n) => {
      const L = view.layers[n];
      layer.img.hidden = !L.on;
      layer.img.style.opacity = String(L.opacity);
      if (L.on) layer.loader.want(layerQuery(t.id, n));
    });
  }
  showCursor();
  writeAddress();
}

// ---- tiles ----

function buildTiles() {
  const template = $("tile-template");
  for (const t of TILES) {
    const el = template.content.firstElementChild.cloneNode(true);
    el.id = "tile-" + t.id;
    el.dataset.plane = t.id;
    el.querySelector(".tile-name").textContent = `${t.key} · ${t.name}`;
    const img = el.querySelector("img.base");
    img.id = "plane-" + t.id;
    img.alt = `${t.name} through the volume`;
    const tile = { el, img, geometry: null, layers: [] };
    tile.loader = makeLoader(img, "api/plane.png", (g) => { tile.geometry = g; layoutTiles(); if (t.id === "oblique") obliqueShown(g); });
    view.info.overlays.forEach((o, n) => {
      const li = document.createElement("img");
      li.className = "layer";
      li.id = `layer-${t.id}-${n}`;
      li.alt = ""; // decorative: the read-out names the layer's value under the cursor
      li.setAttribute("aria-hidden", "true");
      li.dataset.layer = o.name;
      el.querySelector(".layer-stack").append(li);
      tile.layers.push({ img: li, loader: makeLoader(li, "api/overlay.png", null) });
    });
    const frame = el.querySelector(".frame");
    let dragging = false;
    frame.addEventListener("pointerdown", (e) => { dragging = true; frame.setPointerCapture(e.pointerId); pick(t.id, e); });
    frame.addEventListener("pointermove", (e) => { if (dragging) pick(t.id, e); });
    frame.addEventListener("pointerup", () => { dragging = false; });
    el.addEventListener("focus", () => setActive(t.id));
    $("tiles").append(el);
    view.tiles[t.id] = tile;
  }
}

function setActive(id) {
  view.active = id;
  for (const t of TILES) view.tiles[t.id].el.classList.toggle("active", t.id === id);
  writeAddress();
}

// A click or drag on a plane: the cursor moves to the voxel under the pointer, and the other planes follow.
function pick(tileId, event) {
  const tile = view.tiles[tileId];
  const g = tile.geometry;
  if (!g) return;
  const rect = tile.img.getBoundingClientRect();
  const x = (event.clientX - rect.left) / rect.width * g.width - 0.5;  // (0, 0) is the top-left pixel's centre
  const y = (event.clientY - rect.top) / rect.height * g.height - 0.5;
  const v = apply(g.pixelToVoxel, x, y);
  const inside = v.every((c, a) => c >= -0.5 && c <= view.info.dims[a] - 0.5);
  if (tileId !== view.active) setActive(tileId);
  if (!inside) return;
  view.cursor = clampCursor(v);
  render();
}

function step(delta) {
  const t = TILES.find((x) => x.id === view.active);
  if (t.axis === null) {
    const depth = ($("depth-number").valueAsNumber || 0) + delta * view.info.pixelSizeMm;
    const g = view.tiles.oblique.geometry;
    setValue("depth", num(g ? Math.min(g.offsetMaxMm, Math.max(g.offsetMinMm, depth)) : depth));
  } else {
    const c = view.cursor.slice();
    c[t.axis] += delta;
    view.cursor = clampCursor(c);
  }
  render();
}

// One scale (CSS pixels per mm) for the three voxel-axis planes, so distances compare between them: the largest of
// them fits its tile. The oblique plane shares it while it fits; a tilted plane that would not fit is shown smaller,
// and its caption says by how much.
function layoutTiles() {
  if (!view.info) return;
  let room = Infinity;
  for (const t of TILES) {
    const r = view.tiles[t.id].el.querySelector(".view").getBoundingClientRect();
    room = Math.min(room, r.width - 36, r.height - 36);
  }
  const extents = view.info.dims.map((n, a) => n * view.info.voxelSizeMm[a]);
  const pxPerMm = Math.max(0.01, room / Math.max(...extents));
  for (const t of TILES) {
    const tile = view.tiles[t.id];
    const g = tile.geometry;
    if (!g) continue;
    const fit = Math.min(pxPerMm, room / (Math.max(g.width, g.height) * g.pixelSizeMm));
    tile.scale = fit / pxPerMm;
    const css = g.pixelSizeMm * fit;
    const frame = tile.el.querySelector(".frame");
    frame.style.width = (g.width * css) + "px";
    frame.style.height = (g.height * css) + "px";
    tile.img.classList.toggle("crisp", css >= 2);
    const svg = tile.el.querySelector("svg.marks");
    svg.setAttribute("viewBox", `-0.5 -0.5 ${g.width} ${g.height}`);
    tile.el.querySelector(".bounds-line").setAttribute("points", g.cutPixel.map((p) => `${p[0]},${p[1]}`).join(" "));
    tile.el.querySelector(".edge-right").textContent = letter(g.rightDirection, 1);
    tile.el.querySelector(".edge-left").textContent = letter(g.rightDirection, -1);
    tile.el.querySelector(".edge-bottom").textContent = letter(g.downDirection, 1);
    tile.el.querySelector(".edge-top").textContent = letter(g.downDirection, -1);
  }
  drawScale(pxPerMm);
  showCursor();
}

function drawScale(pxPerMm) {
  const target = 120 / pxPerMm;
  const power = Math.pow(10, Math.floor(Math.log10(target)));
  const mm = [5, 2, 1].map((m) => m * power).find((m) => m <= target) || power;
  view.scale = { mm, pxPerMm };
  $("scale-bar").style.width = (mm * pxPerMm) + "px";
  $("scale-text").textContent = scaleLabel(mm);
}

const scaleLabel = (mm) => (mm >= 1 ? `${+mm.toPrecision(3)} mm` : `${+(mm * 1000).toPrecision(3)} µm`);

// The anatomical letter a direction points to most (RAS+ world), for the image edges.
function letter(v, sign) {
  const names = [["R", "L"], ["A", "P"], ["S", "I"]];
  let best = 0;
  for (let a = 1; a < 3; a++) if (Math.abs(v[a]) > Math.abs(v[best])) best = a;
  return names[best][(v[best] * sign) >= 0 ? 0 : 1];
}

// ---- the cursor: cross-hairs on every plane, read-out in the panel ----

function sectionAt(k) {
  if (!view.info.sections) return null;
  return view.info.sections.find((s) => s.k === k) || null;
}

function showCursor() {
  if (!view.info) return;
  const c = view.cursor;
  const mm = voxelToMm(c);
  $("cursor-voxel").textContent = c.join(", ");
  $("cursor-mm").textContent = mm.map((v) => fmt(v, 2)).join(", ");
  const s = sectionAt(c[2]);
  $("cursor-section").textContent = !view.info.sections ? `plane k ${c[2]} (no sidecar)`
    : s ? `${s.number} (${s.status}) at plane k ${c[2]}` : `none at plane k ${c[2]}`;
  for (const t of TILES) {
    const tile = view.tiles[t.id];
    const g = tile.geometry;
    const where = tile.el.querySelector(".tile-where");
    if (t.axis !== null) where.textContent = `${"ijk"[t.axis]} = ${c[t.axis]}` + (t.axis === 2 && s ? ` · section ${s.number}` : "");
    if (!g) continue;
    if (t.axis === null) {
      where.textContent = `${g.orientation} · tilt ${num(g.tiltAboutHorizontalDeg)}°, ${num(g.tiltAboutVerticalDeg)}° · depth ${fmt(g.offsetMm, 2)} mm`;
      if (tile.scale < 0.995) where.textContent += ` · shown at ${Math.round(tile.scale * 100)} % of the scale bar`;
    }
    const p = mmToPixel(g, mm);
    const off = Math.abs(p.off) > g.pixelSizeMm;
    const cross = tile.el.querySelector(".cross");
    cross.classList.toggle("off-plane", off);
    // Lines stop short of the cursor so the voxel itself stays visible.
    const gap = Math.max(2, 6 * g.width / tile.el.querySelector(".frame").getBoundingClientRect().width);
    const set = (cls, x1, y1, x2, y2) => {
      const l = cross.querySelector(cls);
      l.setAttribute("x1", x1); l.setAttribute("y1", y1); l.setAttribute("x2", x2); l.setAttribute("y2", y2);
    };
    set(".cross-h1", -0.5, p.y, p.x - gap, p.y);
    set(".cross-h2", p.x + gap, p.y, g.width - 0.5, p.y);
    set(".cross-v1", p.x, -0.5, p.x, p.y - gap);
    set(".cross-v2", p.x, p.y + gap, p.x, g.height - 0.5);
    tile.el.dataset.cursorPixel = `${num(p.x)},${num(p.y)}`;
    if (t.axis === null && off) where.textContent += ` · cursor ${fmt(p.off, 2)} mm off`;
  }
  drawOutline();
  probe(mm);
}

// Asks for the values under the cursor once per cursor position (cross-hairs are redrawn far more often).
async function probe(mm) {
  const p = new URLSearchParams({ x: num(mm[0]), y: num(mm[1]), z: num(mm[2]) });
  if (view.probe.asked === p.toString()) return;
  view.probe.asked = p.toString();
  const seq = ++view.probe.seq;
  try {
    const response = await fetch("api/probe?" + p);
    if (!response.ok || seq < view.probe.shown) return;
    view.probe.shown = seq;
    const r = await response.json();
    $("cursor-value").textContent = r.value === null ? "outside" : String(+r.value.toPrecision(6));
    const list = $("cursor-layers");
    list.textContent = "";
    r.overlays.forEach((o, n) => {
      const info = view.info.overlays[n];
      const dt = document.createElement("dt");
      dt.textContent = info.name;
      const dd = document.createElement("dd");
      dd.id = `cursor-layer-${n}`;
      dd.textContent = o.value === null ? "outside its grid"
        : info.labels ? (o.value === 0 ? "label 0 (background)" : `label ${+o.value.toPrecision(9)}`) : String(+o.value.toPrecision(6));
      dd.title = `its voxel ${o.voxel.map((v) => fmt(v, 1)).join(", ")}`;
      list.append(dt, dd);
    });
  } catch (e) {
    setState("no answer from the viewer: " + e.message, true);
  }
}

// ---- the oblique plane's controls and its outline in the box ----

function obliqueShown(g) {
  const depth = $("depth");
  const step = view.info.pixelSizeMm;
  depth.min = String(Math.floor(g.offsetMinMm / step) * step);
  depth.max = String(Math.ceil(g.offsetMaxMm / step) * step);
  depth.step = String(step);
  depth.value = String($("depth-number").valueAsNumber || 0);
  setState(`oblique ${g.width} × ${g.height} px · ${fmt(g.pixelSizeMm * 1000, 1)} µm per pixel · ${g.interpolation}`);
}

const OUTLINE_W = 280, OUTLINE_H = 150;

function drawOutline() {
  const canvas = $("outline");
  const info = view.info;
  const g = view.tiles.oblique ? view.tiles.oblique.geometry : null;
  const ratio = window.devicePixelRatio || 1;
  if (canvas.width !== OUTLINE_W * ratio) {
    canvas.width = OUTLINE_W * ratio;
    canvas.height = OUTLINE_H * ratio;
  }
  const ctx = canvas.getContext("2d");
  ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
  ctx.clearRect(0, 0, OUTLINE_W, OUTLINE_H);
  // The box in voxel-aligned mm, like a stack on the bench: the first section face on, later ones receding.
  const [nx, ny, nz] = info.dims;
  const [si, sj, sk] = info.voxelSizeMm;
  const recede = [Math.cos(Math.PI / 6) * 0.55, -Math.sin(Math.PI / 6) * 0.55];
  const raw = (v) => {
    const i = (v[0] + 0.5) * si, j = (v[1] + 0.5) * sj, k = (v[2] + 0.5) * sk;
    return [i + k * recede[0], j + k * recede[1]];
  };
  const lo = [-0.5, -0.5, -0.5], hi = [nx - 0.5, ny - 0.5, nz - 0.5];
  const boxCorners = [];
  for (const k of [lo[2], hi[2]]) for (const j of [lo[1], hi[1]]) for (const i of [lo[0], hi[0]]) boxCorners.push([i, j, k]);
  const fitted = boxCorners.concat(g ? g.corners.map((c) => c.voxel) : []).map(raw);
  const xs = fitted.map((p) => p[0]), ys = fitted.map((p) => p[1]);
  const minX = Math.min(...xs), maxX = Math.max(...xs), minY = Math.min(...ys), maxY = Math.max(...ys);
  const left = 46, margin = 8;
  const scale = Math.min((OUTLINE_W - left - margin) / (maxX - minX), (OUTLINE_H - 2 * margin) / (maxY - minY));
  const ox = left + (OUTLINE_W - left - margin - (maxX - minX) * scale) / 2 - minX * scale;
  const oy = margin + (OUTLINE_H - 2 * margin - (maxY - minY) * scale) / 2 - minY * scale;
  const P = (v) => { const r = raw(v); return [ox + r[0] * scale, oy + r[1] * scale]; };
  const path = (points) => {
    ctx.beginPath();
    points.forEach((v, n) => { const p = P(v); if (n === 0) ctx.moveTo(...p); else ctx.lineTo(...p); });
    ctx.closePath();
  };
  ctx.lineWidth = 1;
  ctx.strokeStyle = "#bdb6c8";
  for (let a = 0; a < 3; a++) {
    for (let c = 0; c < 4; c++) {
      const b1 = (a + 1) % 3, b2 = (a + 2) % 3;
      const from = [0, 0, 0];
      from[a] = lo[a];
      from[b1] = c & 1 ? hi[b1] : lo[b1];
      from[b2] = c & 2 ? hi[b2] : lo[b2];
      const to = from.slice();
      to[a] = hi[a];
      ctx.beginPath(); ctx.moveTo(...P(from)); ctx.lineTo(...P(to)); ctx.stroke();
    }
  }
  ctx.strokeStyle = "#8d85a0";
  path([[lo[0], lo[1], lo[2]], [hi[0], lo[1], lo[2]], [hi[0], hi[1], lo[2]], [lo[0], hi[1], lo[2]]]);
  ctx.stroke();
  if (g) {
    ctx.setLineDash([4, 3]);
    path(g.corners.map((c) => c.voxel));
    ctx.stroke();
    ctx.setLineDash([]);
    if (g.cutVoxel.length >= 3) {
      path(g.cutVoxel);
      ctx.fillStyle = "rgba(208, 80, 127, 0.30)";
      ctx.fill();
      ctx.strokeStyle = "#d0507f";
      ctx.lineWidth = 1.6;
      ctx.stroke();
    }
    const p = P(g.corners[0].voxel);
    ctx.fillStyle = "#4d3b84";
    ctx.fillRect(p[0] - 3, p[1] - 3, 6, 6);
  }
  // Axis key: which way i, j and k run, and the body direction each points to.
  const codes = info.axisCodes || "???";
  const origin = [12, OUTLINE_H - 40];
  const unit = [[1, 0], [0, 1], recede.map((r) => r / 0.55)];
  ctx.font = "11px DejaVu Sans, sans-serif";
  ctx.lineWidth = 1.2;
  ["i", "j", "k"].forEach((name, a) => {
    const len = a === 2 ? 18 : 22;
    const end = [origin[0] + unit[a][0] * len, origin[1] + unit[a][1] * len];
    ctx.strokeStyle = ctx.fillStyle = "#4d3b84";
    ctx.beginPath(); ctx.moveTo(...origin); ctx.lineTo(...end); ctx.stroke();
    const ang = Math.atan2(end[1] - origin[1], end[0] - origin[0]);
    ctx.beginPath();
    ctx.moveTo(...end);
    ctx.lineTo(end[0] - 5 * Math.cos(ang - 0.45), end[1] - 5 * Math.sin(ang - 0.45));
    ctx.lineTo(end[0] - 5 * Math.cos(ang + 0.45), end[1] - 5 * Math.sin(ang + 0.45));
    ctx.closePath(); ctx.fill();
    const at = a === 0 ? [end[0] + 3, end[1] + 4] : a === 1 ? [end[0] + 4, end[1] + 2] : [end[0] + 2, end[1] - 3];
    ctx.fillStyle = "#6c6773";
    ctx.fillText(`${name} ${codes[a]}`, ...at);
  });
  const p = P(view.cursor);
  ctx.fillStyle = "#d0507f";
  ctx.beginPath(); ctx.arc(p[0], p[1], 3.4, 0, 2 * Math.PI); ctx.fill();
  ctx.strokeStyle = "#fff"; ctx.lineWidth = 1.2; ctx.stroke();
}

// ---- overlays ----

function buildOverlayControls() {
  const host = $("overlays");
  if (view.info.overlays.length === 0) return;
  $("overlays-card").hidden = false;
  view.info.overlays.forEach((o, n) => {
    const L = view.layers[n];
    const box = document.createElement("div");
    box.className = "overlay";
    box.id = `overlay-${n}`;
    const head = document.createElement("label");
    head.className = "check overlay-name";
    const on = document.createElement("input");
    on.type = "checkbox";
    on.id = `overlay-${n}-on`;
    on.checked = L.on;
    on.addEventListener("change", () => { L.on = on.checked; render(); });
    head.append(on, ` ${o.name}`);
    const kind = document.createElement("span");
    kind.className = "kind";
    kind.textContent = o.labels ? `labels · ${o.labelValues.length} values` : `${o.dims.join(" × ")} · ${o.axisCodes}`;
    box.append(head, kind);

    const style = document.createElement("select");
    style.id = `overlay-${n}-style`;
    const choices = o.labels ? [["outline", "outlines"], ["fill", "flat colours"]] : HUES.map(([name, hue]) => [String(hue), name]);
    for (const [value, text] of choices) {
      const option = document.createElement("option");
      option.value = value;
      option.textContent = text;
      style.append(option);
    }
    style.value = o.labels ? L.style : String(L.hue);
    style.addEventListener("change", () => { if (o.labels) L.style = style.value; else L.hue = Number(style.value); render(); });
    const styleRow = document.createElement("label");
    styleRow.className = "row";
    styleRow.append(Object.assign(document.createElement("span"), { textContent: o.labels ? "Show as" : "Colour" }), style);
    box.append(styleRow);

    box.append(slider(`overlay-${n}-opacity`, "Opacity", 0, 1, 0.05, L.opacity, (v) => { L.opacity = v; render(); }));
    if (!o.labels) {
      const stepSize = (o.valueRange.max - o.valueRange.min) / 1000 || 1;
      box.append(slider(`overlay-${n}-low`, "Clear below", o.valueRange.min, o.valueRange.max, stepSize, L.low, (v) => { L.low = Math.min(v, L.high - stepSize); render(); }));
      box.append(slider(`overlay-${n}-high`, "Full colour at", o.valueRange.min, o.valueRange.max, stepSize, L.high, (v) => { L.high = Math.max(v, L.low + stepSize); render(); }));
    }
    host.append(box);
  });
}

function slider(id, text, min, max, stepSize, value, onChange) {
  const wrap = document.createElement("div");
  wrap.className = "slider";
  const label = Object.assign(document.createElement("label"), { htmlFor: id, textContent: text });
  const range = Object.assign(document.createElement("input"), { type: "range", id, min: String(min), max: String(max), step: String(stepSize), value: String(value) });
  const number = Object.assign(document.createElement("input"), { type: "number", id: id + "-number", step: "any", value: num(value) });
  number.setAttribute("aria-label", text);
  const box = document.createElement("span");
  box.className = "value";
  box.append(number);
  range.addEventListener("input", () => { number.value = range.value; onChange(range.valueAsNumber); });
  number.addEventListener("input", () => { if (Number.isFinite(number.valueAsNumber)) { range.value = number.value; onChange(number.valueAsNumber); } });
  wrap.append(label, box, range);
  return wrap;
}

function syncOverlayControls() {
  view.layers.forEach((L, n) => {
    const o = view.info.overlays[n];
    const set = (id, v) => { const el = $(id); if (el) el.value = num(v); const nu = $(id + "-number"); if (nu) nu.value = num(v); };
    $(`overlay-${n}-on`).checked = L.on;
    $(`overlay-${n}-style`).value = o.labels ? L.style : String(L.hue);
    set(`overlay-${n}-opacity`, L.opacity);
    if (!o.labels) { set(`overlay-${n}-low`, L.low); set(`overlay-${n}-high`, L.high); }
  });
}

// ---- the page address holds the view ----
// #v=NAME&c=i,j,k&p=PLANE&t=H,V&d=DEPTH&w=LOW,HIGH&s=linear|nearest&a=TILE&o0=ON,STYLE|HUE,OPACITY,LOW,HIGH…

function addressOf() {
  const p = new URLSearchParams();
  p.set("v", view.info.name);
  p.set("c", view.cursor.join(","));
  p.set("p", $("orientation").value);
  p.set("t", `${num($("tiltH-number").valueAsNumber || 0)},${num($("tiltV-number").valueAsNumber || 0)}`);
  p.set("d", num($("depth-number").valueAsNumber || 0));
  p.set("w", `${num($("low-number").valueAsNumber)},${num($("high-number").valueAsNumber)}`);
  p.set("s", $("nearest").checked ? "nearest" : "linear");
  p.set("a", view.active);
  view.layers.forEach((L, n) => {
    p.set(`o${n}`, [L.on ? 1 : 0, view.info.overlays[n].labels ? L.style : L.hue, num(L.opacity), num(L.low), num(L.high)].join(","));
  });
  return "#" + p.toString();
}

function writeAddress() {
  if (!view.ready) return;
  const address = addressOf();
  if (location.hash !== address) history.replaceState(null, "", address);
}

// Applies what an address says; parts that are missing or malformed keep their current value (and are named).
function readAddress(hash) {
  const p = new URLSearchParams(hash.replace(/^#/, ""));
  const ignored = [];
  const numbers = (key, count) => {
    if (!p.has(key)) return null;
    const v = p.get(key).split(",").map(Number);
    if (v.length !== count || !v.every(Number.isFinite)) { ignored.push(key); return null; }
    return v;
  };
  const c = numbers("c", 3);
  if (c) view.cursor = clampCursor(c);
  if (p.has("p")) {
    if ([...$("orientation").options].some((o) => o.value === p.get("p"))) $("orientation").value = p.get("p");
    else ignored.push("p");
  }
  const t = numbers("t", 2);
  if (t) {
    const max = view.info.maxTiltDeg;
    setValue("tiltH", Math.max(-max, Math.min(max, t[0])));
    setValue("tiltV", Math.max(-max, Math.min(max, t[1])));
  }
  const d = numbers("d", 1);
  if (d) setValue("depth", d[0]);
  const w = numbers("w", 2);
  if (w && w[1] > w[0]) { setValue("low", w[0]); setValue("high", w[1]); } else if (w) ignored.push("w");
  if (p.has("s")) $("nearest").checked = p.get("s") === "nearest";
  if (p.has("a") && TILES.some((x) => x.id === p.get("a"))) view.active = p.get("a");
  view.layers.forEach((L, n) => {
    if (!p.has(`o${n}`)) return;
    const parts = p.get(`o${n}`).split(",");
    const o = view.info.overlays[n];
    const [on, style, opacity, low, high] = [parts[0], parts[1], Number(parts[2]), Number(parts[3]), Number(parts[4])];
    if (parts.length !== 5 || !Number.isFinite(opacity) || !Number.isFinite(low) || !Number.isFinite(high) || !(high > low)) { ignored.push(`o${n}`); return; }
    L.on = on === "1";
    if (o.labels && (style === "fill" || style === "outline")) L.style = style;
    else if (!o.labels && HUES.some(([, h]) => String(h) === style)) L.hue = Number(style);
    L.opacity = Math.max(0, Math.min(1, opacity));
    L.low = low;
    L.high = high;
  });
  if (p.has("v") && p.get("v") !== view.info.name) setState(`this address was made for ${p.get("v")}; it is applied to ${view.info.name}`, true);
  else if (ignored.length) setState(`ignored malformed parts of the address: ${ignored.join(", ")}`, true);
}

// ---- controls ----

function pair(rangeId, numberId, onChange) {
  const range = $(rangeId), number = $(numberId);
  range.addEventListener("input", () => { number.value = range.value; onChange(); });
  number.addEventListener("input", () => {
    if (Number.isFinite(number.valueAsNumber)) { range.value = number.value; onChange(); }
  });
}

function setValue(id, value) {
  $(id).value = String(value);
  $(id + "-number").value = String(value);
}

function keepWindowOrdered(changed) {
  const low = $("low-number").valueAsNumber, high = $("high-number").valueAsNumber;
  if (low < high) return;
  const stepSize = (view.info.valueRange.max - view.info.valueRange.min) / 1000 || 1;
  if (changed === "low") setValue("high", low + stepSize); else setValue("low", high - stepSize);
}

// ---- snapshot: the chosen plane as the page shows it, with scale bar and edge letters ----

async function snapshot() {
  const tile = view.tiles[view.active];
  const g = tile.geometry;
  if (!g) return;
  const zoom = Math.max(1, Math.round(600 / Math.max(g.width, g.height)));
  // The same layout as stackbuild reslice --figure: a 28-pixel margin for the letters, 26 more below for the scale bar.
  const pad = 28, w = g.width * zoom, h = g.height * zoom;
  const canvas = document.createElement("canvas");
  canvas.width = w + 2 * pad;
  canvas.height = h + 2 * pad + 26;
  const ctx = canvas.getContext("2d");
  ctx.fillStyle = "#141318";
  ctx.fillRect(0, 0, canvas.width, canvas.height);
  ctx.imageSmoothingEnabled = zoom === 1;
  ctx.drawImage(tile.img, pad, pad, w, h);
  tile.layers.forEach((layer, n) => {
    if (!view.layers[n].on || layer.img.hidden || !layer.img.complete) return;
    ctx.globalAlpha = view.layers[n].opacity;
    ctx.drawImage(layer.img, pad, pad, w, h);
    ctx.globalAlpha = 1;
  });
  ctx.fillStyle = "#e9e5f2";
  ctx.font = "600 13px DejaVu Sans, sans-serif";
  ctx.textAlign = "center";
  ctx.textBaseline = "middle";
  ctx.fillText(letter(g.downDirection, -1), pad + w / 2, pad / 2);
  ctx.fillText(letter(g.downDirection, 1), pad + w / 2, pad + h + pad / 2);
  ctx.fillText(letter(g.rightDirection, -1), pad / 2, pad + h / 2);
  ctx.fillText(letter(g.rightDirection, 1), pad + w + pad / 2, pad + h / 2);
  // Scale bar: a round length close to a fifth of the image width.
  const mmPerPx = g.pixelSizeMm / zoom;
  const target = w / 5 * mmPerPx;
  const power = Math.pow(10, Math.floor(Math.log10(target)));
  const mm = [5, 2, 1].map((m) => m * power).find((m) => m <= target) || power;
  const barY = pad + h + pad + 11;
  ctx.fillRect(pad, barY - 2, mm / mmPerPx, 4);
  ctx.textAlign = "left";
  ctx.font = "12px DejaVu Sans, sans-serif";
  ctx.fillText(scaleLabel(mm), pad + mm / mmPerPx + 8, barY);
  const link = document.createElement("a");
  link.download = `${view.info.name.replace(/\.nii(\.gz)?$/, "")}-${view.active}.png`;
  link.href = canvas.toDataURL("image/png");
  link.click();
}

async function start() {
  const response = await fetch("api/volume");
  if (!response.ok) { setState("could not read the volume's description", true); return; }
  const info = await response.json();
  view.info = info;
  const [nx, ny, nz] = info.dims;
  const facts = $("facts");
  facts.textContent = "";
  const name = document.createElement("b");
  name.textContent = info.name;
  const more = info.overlays.length ? ` · ${info.overlays.length} overlay${info.overlays.length > 1 ? "s" : ""}` : "";
  facts.append(name, ` · ${nx} × ${ny} × ${nz} voxels · ${info.voxelSizeMm.map((v) => fmt(v * 1000, 1)).join(" × ")} µm · axes ${info.axisCodes}${more}`);
  document.title = `${info.name} · StackBuild view`;

  const { min, max } = info.valueRange;
  for (const id of ["low", "high"]) {
    $(id).min = String(min);
    $(id).max = String(max);
    $(id).step = String((max - min) / 1000 || 1);
  }
  setValue("low", info.window.low);
  setValue("high", info.window.high);
  const half = info.diagonalMm / 2;
  $("depth").min = String(-half);
  $("depth").max = String(half);
  view.cursor = clampCursor(info.dims.map((n) => Math.floor(n / 2)));
  view.layers = info.overlays.map((o, n) => ({
    on: true, style: o.labels ? "outline" : "tint", hue: HUES[n % HUES.length][1], opacity: o.labels ? 0.9 : 0.6, low: o.window.low, high: o.window.high,
  }));

  buildTiles();
  buildOverlayControls();
  readAddress(location.hash);
  syncOverlayControls();
  setActive(view.active);
  view.ready = true;

  pair("tiltH", "tiltH-number", render);
  pair("tiltV", "tiltV-number", render);
  pair("depth", "depth-number", render);
  pair("low", "low-number", () => { keepWindowOrdered("low"); render(); });
  pair("high", "high-number", () => { keepWindowOrdered("high"); render(); });
  $("orientation").addEventListener("change", render);
  $("nearest").addEventListener("change", render);
  $("straighten").addEventListener("click", () => { setValue("tiltH", 0); setValue("tiltV", 0); setValue("depth", 0); render(); });
  $("through-cursor").addEventListener("click", () => {
    const g = view.tiles.oblique.geometry;
    if (!g) return;
    const centre = g.centreMm.map((c, a) => c - g.offsetMm * g.depthDirection[a]);
    setValue("depth", num(dot(sub(voxelToMm(view.cursor), centre), g.depthDirection)));
    render();
  });
  $("auto-window").addEventListener("click", () => { setValue("low", info.window.low); setValue("high", info.window.high); render(); });
  $("centre-cursor").addEventListener("click", () => { view.cursor = clampCursor(info.dims.map((n) => Math.floor(n / 2))); render(); });
  $("snapshot").addEventListener("click", snapshot);
  document.addEventListener("keydown", (e) => {
    if (e.target.closest && e.target.closest("input, select, textarea")) return;
    const t = TILES.find((x) => x.key === e.key);
    if (t) { setActive(t.id); e.preventDefault(); return; }
    const delta = { ArrowUp: 1, PageUp: 1, ArrowDown: -1, PageDown: -1 }[e.key];
    if (delta) { step(e.shiftKey ? 10 * delta : delta); e.preventDefault(); }
  });
  window.addEventListener("hashchange", () => { readAddress(location.hash); syncOverlayControls(); setActive(view.active); render(); });
  window.addEventListener("resize", layoutTiles);
  render();
}

start().catch((e) => setState("could not start: " + e.message, true));

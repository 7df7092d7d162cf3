// StackBuild reslice viewer. The server does all reslicing; this page keeps the wanted plane, asks for it with
// at most one request in flight (the newest wanted state goes out when the previous answer is in, states in
// between are skipped), and shows the answer with its geometry.
"use strict";

const $ = (id) => document.getElementById(id);

const view = {
  info: null,       // /api/volume
  geometry: null,   // the shown plane's X-Plane description
  wanted: null,     // query string of the wanted plane
  inFlight: null,   // query string being fetched, or null
  shown: null,      // query string of the shown plane
  objectUrl: null,
  pointer: null,    // [x, y] image pixel under the pointer, or null
};

const fmt = (v, digits) => (Object.is(v, -0) ? 0 : v).toFixed(digits);

function queryOf() {
  const p = new URLSearchParams();
  p.set("plane", $("orientation").value);
  p.set("tiltH", String($("tiltH-number").valueAsNumber || 0));
  p.set("tiltV", String($("tiltV-number").valueAsNumber || 0));
  p.set("depth", String($("depth-number").valueAsNumber || 0));
  p.set("low", String($("low-number").valueAsNumber));
  p.set("high", String($("high-number").valueAsNumber));
  p.set("sampling", $("nearest").checked ? "nearest" : "linear");
  return p.toString();
}

function want() {
  view.wanted = queryOf();
  $("plane").dataset.wanted = view.wanted;
  pump();
}

async function pump() {
  if (view.inFlight !== null || view.wanted === view.shown) return;
  const query = view.wanted;
  view.inFlight = query;
  setState("updating…");
  try {
    const response = await fetch("api/plane.png?" + query);
    if (!response.ok) {
      setState((await response.text()).trim(), true);
    } else {
      const geometry = JSON.parse(response.headers.get("X-Plane"));
      const url = URL.createObjectURL(await response.blob());
      const img = $("plane");
      img.src = url;
      await img.decode();
      if (view.objectUrl) URL.revokeObjectURL(view.objectUrl);
      view.objectUrl = url;
      view.geometry = geometry;
      view.shown = query;
      img.dataset.shown = query;
      showGeometry();
    }
  } catch (e) {
    setState("no answer from the viewer: " + e.message, true);
  } finally {
    view.inFlight = null;
    if (view.wanted !== query) pump();
  }
}

function setState(text, problem = false) {
  const el = $("state");
  el.textContent = text;
  el.classList.toggle("problem", problem);
}

// ---- the plane image, its scale and its edge letters ----

function layoutImage() {
  const g = view.geometry;
  if (!g) return;
  const stage = $("stage").getBoundingClientRect();
  const footHeight = 44;
  // One scale for every tilt: the volume's diagonal fits the stage, so turning the plane never rescales it.
  const pxPerMm = Math.max(0.01, (Math.min(stage.width, stage.height - footHeight) - 56) / view.info.diagonalMm);
  const img = $("plane");
  const cssPerPixel = g.pixelSizeMm * pxPerMm;
  img.style.width = (g.width * cssPerPixel) + "px";
  img.style.height = (g.height * cssPerPixel) + "px";
  img.classList.toggle("crisp", cssPerPixel >= 2);
  // The volume's edge on the plane, in the image's own pixel coordinates (pixel centres at whole numbers).
  const bounds = $("bounds");
  bounds.setAttribute("viewBox", `-0.5 -0.5 ${g.width} ${g.height}`);
  $("bounds-line").setAttribute("points", g.cutPixel.map((p) => `${p[0]},${p[1]}`).join(" "));
  drawScale(pxPerMm, stage.width);
}

function drawScale(pxPerMm, stageWidth) {
  const target = Math.min(160, stageWidth * 0.14) / pxPerMm;
  const power = Math.pow(10, Math.floor(Math.log10(target)));
  const mm = [5, 2, 1].map((m) => m * power).find((m) => m <= target) || power;
  $("scale-bar").style.width = (mm * pxPerMm) + "px";
  $("scale-text").textContent = mm >= 1 ? `${+mm.toPrecision(3)} mm` : `${+(mm * 1000).toPrecision(3)} µm`;
}

// The anatomical letter a direction points to most (RAS+ world), as the image edge labels.
function letter(v, sign) {
  const names = [["R", "L"], ["A", "P"], ["S", "I"]];
  let best = 0;
  for (let a = 1; a < 3; a++) if (Math.abs(v[a]) > Math.abs(v[best])) best = a;
  return names[best][(v[best] * sign) >= 0 ? 0 : 1];
}

function showGeometry() {
  const g = view.geometry;
  layoutImage();
  $("edge-right").textContent = letter(g.rightDirection, 1);
  $("edge-left").textContent = letter(g.rightDirection, -1);
  $("edge-bottom").textContent = letter(g.downDirection, 1);
  $("edge-top").textContent = letter(g.downDirection, -1);
  // The depth slider spans the offsets at which this plane still cuts the volume.
  const depth = $("depth");
  const step = view.info.pixelSizeMm;
  depth.min = String(Math.floor(g.offsetMinMm / step) * step);
  depth.max = String(Math.ceil(g.offsetMaxMm / step) * step);
  depth.step = String(step);
  depth.value = String($("depth-number").valueAsNumber || 0);
  setState(`${g.width} × ${g.height} px · ${fmt(g.pixelSizeMm * 1000, 1)} µm per pixel · ${g.interpolation}`);
  drawOutline();
  showPointer();
}

// ---- pointer position in mm and voxels ----

function apply(m, x, y) {
  return [0, 1, 2].map((r) => m[r][0] * x + m[r][1] * y + m[r][2]);
}

function showPointer() {
  const g = view.geometry;
  if (!g || !view.pointer) {
    $("pointer-mm").textContent = "—";
    $("pointer-voxel").textContent = "—";
    drawOutline();
    return;
  }
  const [x, y] = view.pointer;
  const mm = apply(g.pixelToWorldMm, x, y);
  const voxel = apply(g.pixelToVoxel, x, y);
  const dims = view.info.dims;
  const inside = voxel.every((v, a) => v >= -0.5 && v <= dims[a] - 0.5);
  $("pointer-mm").textContent = mm.map((v) => fmt(v, 2)).join(", ");
  $("pointer-voxel").textContent = voxel.map((v) => fmt(v, 1)).join(", ") + (inside ? "" : " (outside)");
  drawOutline(inside ? voxel : null);
}

function onPointer(event) {
  const g = view.geometry;
  if (!g) return;
  const rect = $("plane").getBoundingClientRect();
  // Pixel (0, 0) is the centre of the top-left pixel.
  view.pointer = [
    (event.clientX - rect.left) / rect.width * g.width - 0.5,
    (event.clientY - rect.top) / rect.height * g.height - 0.5,
  ];
  showPointer();
}

// ---- outline of the volume box with the cut ----

const OUTLINE_W = 280, OUTLINE_H = 180;

function drawOutline(pointVoxel = null) {
  const canvas = $("outline");
  const g = view.geometry;
  const info = view.info;
  if (!info) return;
  const ratio = window.devicePixelRatio || 1;
  if (canvas.width !== OUTLINE_W * ratio) {
    canvas.width = OUTLINE_W * ratio;
    canvas.height = OUTLINE_H * ratio;
  }
  const ctx = canvas.getContext("2d");
  ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
  ctx.clearRect(0, 0, OUTLINE_W, OUTLINE_H);

  // The box in voxel-aligned mm, drawn like a stack on the bench: the first section face on (i right, j down),
  // later sections receding up and to the right.
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
  // Fit the box (and the whole image's frame, which may reach beyond it) into the canvas, leaving room for the axes.
  const fitted = boxCorners.concat(g ? g.corners.map((c) => c.voxel) : []).map(raw);
  const xs = fitted.map((p) => p[0]), ys = fitted.map((p) => p[1]);
  const minX = Math.min(...xs), maxX = Math.max(...xs), minY = Math.min(...ys), maxY = Math.max(...ys);
  const left = 46, margin = 10;
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
  // The first section, a little stronger: it anchors the reading of the box.
  ctx.strokeStyle = "#8d85a0";
  path([[lo[0], lo[1], lo[2]], [hi[0], lo[1], lo[2]], [hi[0], hi[1], lo[2]], [lo[0], hi[1], lo[2]]]);
  ctx.stroke();

  if (g) {
    ctx.setLineDash([4, 3]);
    ctx.strokeStyle = "#8d85a0";
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

  // Axis key in the lower left: which way i, j and k run, and the body direction each points to.
  const codes = info.axisCodes || "???";
  const origin = [12, OUTLINE_H - 46];
  const unit = [[1, 0], [0, 1], recede.map((r) => r / 0.55)];
  ctx.font = "11px DejaVu Sans, sans-serif";
  ctx.lineWidth = 1.2;
  ["i", "j", "k"].forEach((name, a) => {
    const len = a === 2 ? 20 : 24;
    const end = [origin[0] + unit[a][0] * len, origin[1] + unit[a][1] * len];
    ctx.strokeStyle = ctx.fillStyle = "#4d3b84";
    ctx.beginPath(); ctx.moveTo(...origin); ctx.lineTo(...end); ctx.stroke();
    const ang = Math.atan2(end[1] - origin[1], end[0] - origin[0]);
    ctx.beginPath();
    ctx.moveTo(...end);
    ctx.lineTo(end[0] - 5 * Math.cos(ang - 0.45), end[1] - 5 * Math.sin(ang - 0.45));
    ctx.lineTo(end[0] - 5 * Math.cos(ang + 0.45), end[1] - 5 * Math.sin(ang + 0.45));
    ctx.closePath(); ctx.fill();
    const label = `${name} ${codes[a]}`;
    const at = a === 0 ? [end[0] + 3, end[1] + 4] : a === 1 ? [end[0] + 4, end[1] + 2] : [end[0] + 2, end[1] - 3];
    ctx.fillStyle = "#6c6773";
    ctx.fillText(label, ...at);
  });

  if (pointVoxel) {
    const p = P(pointVoxel);
    ctx.fillStyle = "#4d3b84";
    ctx.beginPath(); ctx.arc(p[0], p[1], 3.4, 0, 2 * Math.PI); ctx.fill();
    ctx.strokeStyle = "#fff"; ctx.lineWidth = 1.2; ctx.stroke();
  }
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
  const step = (view.info.valueRange.max - view.info.valueRange.min) / 1000 || 1;
  if (changed === "low") setValue("high", low + step); else setValue("low", high - step);
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
  facts.append(name, ` · ${nx} × ${ny} × ${nz} voxels · ${info.voxelSizeMm.map((v) => fmt(v * 1000, 1)).join(" × ")} µm · axes ${info.axisCodes}`);
  document.title = `${info.name} · StackBuild reslice`;

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

  pair("tiltH", "tiltH-number", want);
  pair("tiltV", "tiltV-number", want);
  pair("depth", "depth-number", want);
  pair("low", "low-number", () => { keepWindowOrdered("low"); want(); });
  pair("high", "high-number", () => { keepWindowOrdered("high"); want(); });
  $("orientation").addEventListener("change", want);
  $("nearest").addEventListener("change", want);
  $("straighten").addEventListener("click", () => { setValue("tiltH", 0); setValue("tiltV", 0); setValue("depth", 0); want(); });
  $("auto-window").addEventListener("click", () => { setValue("low", info.window.low); setValue("high", info.window.high); want(); });
  $("plane").addEventListener("mousemove", onPointer);
  $("plane").addEventListener("mouseleave", () => { view.pointer = null; showPointer(); });
  window.addEventListener("resize", () => { layoutImage(); drawOutline(); });
  want();
}

start().catch((e) => setState("could not start: " + e.message, true));

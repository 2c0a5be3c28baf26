"""The style sheet and script of the interactive map page (plain canvas, no library).

The script reads the page's data (a ``<script type="application/json">`` block), decodes each
layer's PNG and its float32 values, and draws the active layer on a canvas with nearest-cell
scaling, the marks over it. Pan with the pointer (drag), zoom with the wheel or the + and -
buttons, "Fit" shows the whole grid. Under the cursor it reads every layer's value with its
unit, the cell's flag meanings and the cell's coordinates. Text from the run is only ever set
with ``textContent`` (never parsed as HTML). ``window.lidmeltExplore`` gives tests the cell
under a point and a promise of the next drawing.
"""

from __future__ import annotations

STYLE = """
*{box-sizing:border-box}
body{font:14px/1.4 system-ui,sans-serif;margin:0;padding:12px;color:#1b1b1b;background:#fff}
h1{font-size:1.2em;margin:0 0 4px;overflow-wrap:anywhere}
p.note{margin:4px 0;color:#444;overflow-wrap:anywhere}
#bar{display:flex;flex-wrap:wrap;gap:6px;align-items:center;margin:6px 0}
#bar select{max-width:100%}
#bar label{white-space:nowrap}
#main{display:flex;flex-wrap:wrap;gap:12px;align-items:flex-start}
#view{flex:1 1 560px;min-width:0;max-width:100%}
#map{display:block;width:100%;height:60vh;background:#e6edf3;
  touch-action:none;cursor:crosshair;border:1px solid #999}
#side{flex:0 1 360px;min-width:0;max-width:100%}
#legend .bar{height:14px;border:1px solid #777}
#legend .ends{display:flex;justify-content:space-between}
.sw{display:inline-block;width:12px;height:12px;border:1px solid #777;vertical-align:middle;
  margin-right:4px}
table{border-collapse:collapse;width:100%;table-layout:fixed}
td{border-top:1px solid #ddd;padding:2px 4px;vertical-align:top;overflow-wrap:anywhere}
tr.active td{background:#eef4ff;font-weight:600}
@media (max-width:800px){#side{flex:1 1 100%}}
"""

SCRIPT = r"""
(function () {
"use strict";
const D = JSON.parse(document.getElementById("lidmelt-data").textContent);
const F = D.frame, rows = F.rows, cols = F.cols;
const canvas = document.getElementById("map"), ctx = canvas.getContext("2d");
const select = document.getElementById("layer");
const $ = (id) => document.getElementById(id);
function bytes(b64) {
  const s = atob(b64), out = new Uint8Array(s.length);
  for (let i = 0; i < s.length; i++) out[i] = s.charCodeAt(i);
  return out;
}
async function inflate(b64) {
  if (typeof DecompressionStream === "undefined") {  // Chrome 80, Firefox 113, Safari 16.4 on
    $("values").textContent = "This browser cannot read the page's values (it lacks "
      + "DecompressionStream): open the page in a browser from 2023 on.";
    throw new Error("DecompressionStream is not available");
  }
  const stream = new Blob([bytes(b64)]).stream().pipeThrough(new DecompressionStream("deflate"));
  return new Uint8Array(await new Response(stream).arrayBuffer());
}
const layers = D.layers.map((L) => {
  const img = new Image();
  const lay = {L: L, values: null, img: img, noMelt: null};
  const decoded = new Promise((ok) => { img.onload = ok; img.onerror = ok; });
  img.src = L.image;
  const values = inflate(L.values).then((raw) => {
    lay.values = new Float32Array(raw.buffer);
  });
  const noMelt = L.no_melt === null ? null : inflate(L.no_melt).then((raw) => {
    lay.noMelt = raw;
  });
  lay.ready = Promise.all([decoded, values, noMelt]);
  return lay;
});
let flags = null;
const flagsReady = D.flags === null ? null : inflate(D.flags.values).then((raw) => {
  flags = raw;
});
let active = 0, scale = 1, tx = 0, ty = 0, drag = null, last = null, drawn = [];
const show = {plumes: true, stations: true, candidates: true, tracks: true};
function el(tag, text, cls) {
  const e = document.createElement(tag);
  if (text !== undefined && text !== null) e.textContent = String(text);
  if (cls) e.className = cls;
  return e;
}
function fit() {
  const w = canvas.clientWidth, h = canvas.clientHeight;
  scale = Math.min(w / cols, h / rows);
  tx = (w - cols * scale) / 2; ty = (h - rows * scale) / 2;
}
function resize() {
  const r = window.devicePixelRatio || 1;
  const tall = Math.min(window.innerHeight * 0.75, canvas.clientWidth * rows / cols);
  canvas.style.height = Math.round(Math.max(260, tall)) + "px";
  canvas.width = Math.round(canvas.clientWidth * r);
  canvas.height = Math.round(canvas.clientHeight * r);
}
function sx(col) { return tx + (col / F.stride) * scale; }
function sy(row) { return ty + (row / F.stride) * scale; }
function drawMarks() {
  const M = D.marks;
  ctx.lineWidth = 1.5;
  if (show.tracks) for (const t of M.tracks) {
    ctx.strokeStyle = "#000"; ctx.beginPath();
    let on = false;
    for (let i = 0; i < t.col.length; i++) {
      if (t.col[i] === null) { on = false; continue; }
      if (on) ctx.lineTo(sx(t.col[i]), sy(t.row[i])); else ctx.moveTo(sx(t.col[i]), sy(t.row[i]));
      on = true;
    }
    ctx.stroke();
  }
  if (show.candidates) for (const c of M.candidates) {
    ctx.strokeStyle = "#d62728";
    for (const ring of c.rings) {
      ctx.beginPath();
      ring[0].forEach((x, i) => {
        if (i) ctx.lineTo(sx(x), sy(ring[1][i])); else ctx.moveTo(sx(x), sy(ring[1][i]));
      });
      ctx.stroke();
    }
    if (c.rings.length) {
      const ring = c.rings[0];
      const ok = (v) => v !== null;
      label(c.label, sx(Math.min(...ring[0].filter(ok))), sy(Math.min(...ring[1].filter(ok))) - 4,
            "#d62728");
    }
  }
  if (show.stations) for (const s of M.stations) {
    ctx.fillStyle = "#fff"; ctx.strokeStyle = "#000";
    ctx.beginPath(); ctx.rect(sx(s.col) - 4, sy(s.row) - 4, 8, 8); ctx.fill(); ctx.stroke();
    label(s.name, sx(s.col) + 6, sy(s.row) - 6, "#000");
  }
  if (show.plumes) for (const p of M.plumes) {
    ctx.strokeStyle = "#fff"; ctx.lineWidth = 4;
    ctx.beginPath(); ctx.arc(sx(p.col), sy(p.row), 6, 0, 2 * Math.PI); ctx.stroke();
    ctx.strokeStyle = "#000"; ctx.lineWidth = 1.5;
    ctx.beginPath(); ctx.arc(sx(p.col), sy(p.row), 6, 0, 2 * Math.PI); ctx.stroke();
    label(p.name, sx(p.col) + 8, sy(p.row) + 14, "#000");
  }
}
function label(text, x, y, colour) {
  ctx.font = "italic 12px system-ui,sans-serif";
  ctx.lineWidth = 3; ctx.strokeStyle = "#fff"; ctx.strokeText(text, x, y);
  ctx.fillStyle = colour; ctx.fillText(text, x, y); ctx.lineWidth = 1.5;
}
function draw() {
  const r = window.devicePixelRatio || 1;
  ctx.setTransform(1, 0, 0, 1, 0, 0);
  ctx.fillStyle = "#e6edf3"; ctx.fillRect(0, 0, canvas.width, canvas.height);
  ctx.setTransform(r, 0, 0, r, 0, 0);
  ctx.imageSmoothingEnabled = false;
  const lay = layers[active];
  ctx.drawImage(lay.img, tx, ty, cols * scale, rows * scale);
  drawMarks();
  const done = drawn; drawn = [];
  done.forEach((f) => f());
}
function redraw() { return layers[active].ready.then(draw); }
function cellAt(cx, cy) {
  const b = canvas.getBoundingClientRect();
  const c = Math.floor((cx - b.left - tx) / scale), r = Math.floor((cy - b.top - ty) / scale);
  return (r >= 0 && r < rows && c >= 0 && c < cols) ? {row: r, col: c} : null;
}
function fmt(v) {
  if (!Number.isFinite(v)) return "";
  const a = Math.abs(v);
  if (a !== 0 && (a < 1e-3 || a >= 1e6)) return v.toExponential(4);
  return String(Number(v.toPrecision(5)));
}
function cellText(lay, k) {
  const v = lay.values[k], L = lay.L;
  const noMelt = lay.noMelt !== null && (lay.noMelt[k >> 3] >> (k & 7)) & 1;
  if (L.legend.classes) {
    const c = L.legend.classes.find((q) => q.value === v);
    return c ? fmt(v) + " (" + c.label + ")" : (Number.isFinite(v) ? fmt(v) : "no data");
  }
  if (!Number.isFinite(v)) return noMelt ? L.no_melt_label : "no data";
  const text = fmt(v) + (L.units ? " " + L.units : "");
  return noMelt ? text + " (" + L.no_melt_label + ")" : text;
}
function readout(cell) {
  const body = $("values"); body.replaceChildren();
  const where = $("where"), fl = $("flags"); fl.replaceChildren();
  if (cell === null) { where.textContent = "Move the pointer over the map."; return; }
  if (flagsReady !== null && flags === null) return;
  if (layers.some((lay) => lay.values === null)) return;
  const k = cell.row * cols + cell.col;
  const R = F.offset + cell.row * F.stride, C = F.offset + cell.col * F.stride, t = F.transform;
  const x = t[0] * (C + 0.5) + t[1] * (R + 0.5) + t[2];
  const y = t[3] * (C + 0.5) + t[4] * (R + 0.5) + t[5];
  where.textContent = "Cell row " + R + ", column " + C + " (" + F.axes[0] + " " + fmt(x) +
    F.axis_unit + ", " + F.axes[1] + " " + fmt(y) + F.axis_unit + ")";
  where.dataset.row = R; where.dataset.col = C;
  layers.forEach((lay, i) => {
    const tr = el("tr", null, i === active ? "active" : "");
    tr.dataset.name = lay.L.name; tr.dataset.value = String(lay.values[k]);
    tr.appendChild(el("td", lay.L.name)); tr.appendChild(el("td", cellText(lay, k)));
    body.appendChild(tr);
  });
  if (flags === null) return;
  const f = flags[k];
  fl.dataset.value = String(f);
  if (f === D.flags.nodata) { fl.appendChild(el("li", "no input data")); return; }
  const bits = Object.keys(D.flags.meanings).filter((b) => f & Number(b));
  if (!bits.length) fl.appendChild(el("li", "no flag set (valid cell)"));
  for (const b of bits) fl.appendChild(el("li", "bit " + b + ": " + D.flags.meanings[b]));
}
function legend() {
  const L = layers[active].L, box = $("legend"); box.replaceChildren();
  box.appendChild(el("div", L.label));
  const G = L.legend;
  if (G.classes) {
    for (const c of G.classes) {
      const d = el("div"), sw = el("span", null, "sw"); sw.style.background = c.color;
      d.appendChild(sw); d.appendChild(document.createTextNode(c.label)); box.appendChild(d);
    }
  } else {
    const bar = el("div", null, "bar");
    bar.style.background = "linear-gradient(to right," + G.gradient.join(",") + ")";
    box.appendChild(bar);
    const ends = el("div", null, "ends");
    const lo = (G.extend === "min" || G.extend === "both") ? "\u2264 " : "";
    const hi = (G.extend === "max" || G.extend === "both") ? "\u2265 " : "";
    ends.appendChild(el("span", lo + fmt(G.vmin))); ends.appendChild(el("span", hi + fmt(G.vmax)));
    box.appendChild(ends);
    if (G.no_melt) swatch(box, G.no_melt.color, G.no_melt.label);
  }
  swatch(box, G.nodata, "no data");
}
function swatch(box, colour, text) {
  const d = el("div"), sw = el("span", null, "sw"); sw.style.background = colour;
  d.appendChild(sw); d.appendChild(document.createTextNode(text)); box.appendChild(d);
}
function zoom(f, cx, cy) {
  tx = cx - (cx - tx) * f; ty = cy - (cy - ty) * f; scale *= f; draw();
}
D.layers.forEach((L) => {
  const o = el("option", L.title + " [" + L.name + "]");
  o.value = L.name; select.appendChild(o);
});
select.addEventListener("change", () => {
  active = Math.max(0, D.layers.findIndex((L) => L.name === select.value));
  legend(); redraw(); readout(last);
});
canvas.addEventListener("pointerdown", (e) => {
  drag = {x: e.clientX, y: e.clientY, tx: tx, ty: ty}; canvas.setPointerCapture(e.pointerId);
});
canvas.addEventListener("pointerup", () => { drag = null; });
canvas.addEventListener("pointermove", (e) => {
  if (drag) { tx = drag.tx + e.clientX - drag.x; ty = drag.ty + e.clientY - drag.y; draw(); }
  last = cellAt(e.clientX, e.clientY); readout(last);
});
canvas.addEventListener("wheel", (e) => {
  e.preventDefault();
  const b = canvas.getBoundingClientRect();
  zoom(e.deltaY < 0 ? 1.25 : 0.8, e.clientX - b.left, e.clientY - b.top);
}, {passive: false});
const centre = (f) => zoom(f, canvas.clientWidth / 2, canvas.clientHeight / 2);
$("zoom-in").addEventListener("click", () => centre(1.5));
$("zoom-out").addEventListener("click", () => centre(1 / 1.5));
$("fit").addEventListener("click", () => { fit(); draw(); });
for (const key of Object.keys(show)) {
  const box = $("show-" + key);
  if (box) box.addEventListener("change", () => { show[key] = box.checked; draw(); });
}
window.addEventListener("resize", () => { resize(); fit(); draw(); });
resize(); fit(); legend();
const first = Promise.all([flagsReady, ...layers.map((lay) => lay.ready)]).then(() => {
  readout(null); return redraw();
});
window.lidmeltExplore = {
  ready: first,
  nextDraw: () => new Promise((ok) => drawn.push(ok)),
  cellCentre: (row, col) => {
    const b = canvas.getBoundingClientRect();
    const r = (row - F.offset) / F.stride, c = (col - F.offset) / F.stride;
    return {x: b.left + tx + (c + 0.5) * scale, y: b.top + ty + (r + 0.5) * scale};
  },
};
})();
"""

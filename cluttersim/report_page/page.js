// cluttersim report page: views, axes, the echo probe, the map marks and the tables.
// Written for this page; no framework. Data: #cs-meta (JSON) and #cs-blobs (packed arrays,
// see cluttersim/report.py: DEFLATE of byte-shuffled little-endian integers, base64).
"use strict";

const META = JSON.parse(document.getElementById("cs-meta").textContent);
const BLOBS = JSON.parse(document.getElementById("cs-blobs").textContent);
const ARR = {};  // name -> typed array of codes
const $ = (id) => document.getElementById(id);
const state = { view: null, pinned: null, hover: null, chosenCandidate: null };

// ------------------------------------------------------------------ decoding

function base64Bytes(text) {
  const bin = atob(text);
  const out = new Uint8Array(bin.length);
  for (let i = 0; i < bin.length; i++) out[i] = bin.charCodeAt(i);
  return out;
}

async function inflate(bytes) {
  const stream = new Blob([bytes]).stream().pipeThrough(new DecompressionStream("deflate"));
  return new Uint8Array(await new Response(stream).arrayBuffer());
}

const TYPES = { "|u1": Uint8Array, "<u2": Uint16Array, "<i2": Int16Array };

async function unpack(entry) {
  const raw = await inflate(base64Bytes(entry.data));
  const Type = TYPES[entry.dtype];
  const size = Type.BYTES_PER_ELEMENT;
  if (size === 1) return raw;
  const n = entry.length;
  const bytes = new Uint8Array(n * size);
  for (let b = 0; b < size; b++) {
    const base = b * n;
    for (let i = 0; i < n; i++) bytes[i * size + b] = raw[base + i];
  }
  return new Type(bytes.buffer);  // little-endian, as every current browser's typed arrays
}

function value(name, idx) {
  const a = ARR[name];
  if (!a) return NaN;
  const q = BLOBS[name].q;
  const c = a[idx];
  if (!q) return c;
  return c === q.missing ? NaN : q.offset + q.step * c;
}

function isBelow(name, idx) {
  const a = ARR[name];
  return a && BLOBS[name].q && a[idx] === BLOBS[name].q.lo;
}

// ------------------------------------------------------------------ formatting

const fmt = (v, d) => (Number.isFinite(v) ? v.toFixed(d) : "—");
const minus = (s) => s.replace(/^-/, "−");
function latText(v) { return Number.isFinite(v) ? `${Math.abs(v).toFixed(5)}° ${v < 0 ? "S" : "N"}` : "—"; }
function lonText(v) {
  if (!Number.isFinite(v)) return "—";
  const w = ((v + 540) % 360) - 180;
  return `${Math.abs(w).toFixed(5)}° ${w < 0 ? "W" : "E"}`;
}
function distText(m) {
  if (!Number.isFinite(m)) return "—";
  return m >= 10000 ? `${(m / 1000).toFixed(2)} km` : `${m.toFixed(0)} m`;
}
function niceStep(span, count) {
  const raw = span / Math.max(count, 1);
  const p = Math.pow(10, Math.floor(Math.log10(raw)));
  const f = raw / p;
  return (f < 1.5 ? 1 : f < 3 ? 2 : f < 7 ? 5 : 10) * p;
}
function ticks(lo, hi, count) {
  if (!(hi > lo)) return [];
  const step = niceStep(hi - lo, count);
  const out = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + 1e-9 * step; v += step) out.push(+v.toPrecision(12));
  return out;
}
function decimals(values) {
  if (values.length < 2) return 0;
  const step = Math.abs(values[1] - values[0]);
  return Math.max(0, Math.min(6, -Math.floor(Math.log10(step) + 1e-9)));
}
function el(tag, cls, text) {
  const e = document.createElement(tag);
  if (cls) e.className = cls;
  if (text !== undefined) e.textContent = text;
  return e;
}
const SVG_NS = "http://www.w3.org/2000/svg";
function svgEl(tag, attrs) {
  const e = document.createElementNS(SVG_NS, tag);
  for (const k in attrs) e.setAttribute(k, attrs[k]);
  return e;
}
const rgb = (c) => `rgb(${c[0]},${c[1]},${c[2]})`;

// ------------------------------------------------------------------ geometry of a grid

function gridOf(view) { return META.grids[view.grid]; }
function span(g) {  // sample-space size covered by the image (whole blocks)
  const s = g.shape;
  return { x: s.columns * s.trace_step, y: s.rows * s.sample_step };
}
// cell (column, row) -> the trace and sample it stands for (the block's strongest)
function cellSample(gname, col, row) {
  const g = META.grids[gname], s = g.shape;
  const idx = col * s.rows + row;
  let t = col, k = row;
  if (s.trace_step > 1 || s.sample_step > 1) {
    const pick = ARR[`${gname}.pick`][idx];
    t = col * s.trace_step + Math.floor(pick / s.sample_step);
    k = row * s.sample_step + (pick % s.sample_step);
  }
  return { idx, t: Math.min(t, s.ntrace - 1), k: Math.min(k, s.nsample - 1) };
}
function cellOf(gname, t, k) {
  const s = META.grids[gname].shape;
  return { col: Math.floor(t / s.trace_step), row: Math.floor(k / s.sample_step) };
}
function axisDelayUs(g, y) { return g.axis_offset_us + (y - 0.5) * META.dt_us; }  // y in samples from the top edge
function yOfDelayUs(g, d) { return (d - g.axis_offset_us) / META.dt_us + 0.5; }
function depthM(delayAfterNadirUs) {
  return (META.c_m_s * delayAfterNadirUs * 1e-6) / (2 * Math.sqrt(META.permittivity));
}
function medianNadirAxis(g) {
  const v = g.traces.nadir_axis_us.filter((x) => x !== null).sort((a, b) => a - b);
  if (!v.length) return null;
  const m = v.length >> 1;
  return v.length % 2 ? v[m] : 0.5 * (v[m - 1] + v[m]);
}

// ------------------------------------------------------------------ axes

function drawAxes(view) {
  const g = gridOf(view), sp = span(g), stage = $("rg-stage");
  const h = stage.clientHeight, w = stage.clientWidth;
  const left = $("axis-left"), right = $("axis-right"), bottom = $("axis-bottom");
  for (const a of [left, right, bottom]) a.replaceChildren();
  const top = axisDelayUs(g, 0), bot = axisDelayUs(g, sp.y);
  const dts = ticks(top, bot, Math.max(3, Math.round(h / 60)));
  const dd = decimals(dts);
  for (const d of dts) {
    const t = el("div", "tick", minus(d.toFixed(dd)));
    t.style.top = `${((yOfDelayUs(g, d)) / sp.y) * 100}%`;
    left.appendChild(t);
  }
  left.appendChild(el("div", "title", g.delay_label));
  const ref = medianNadirAxis(g);
  if (ref !== null) {
    const dTop = depthM(top - ref), dBot = depthM(bot - ref);
    const zs = ticks(Math.max(0, dTop), dBot, Math.max(3, Math.round(h / 60)));
    const zd = decimals(zs);
    for (const z of zs) {
      const d = ref + (z * 2 * Math.sqrt(META.permittivity)) / META.c_m_s * 1e6;
      const t = el("div", "tick", z.toFixed(zd));
      t.style.top = `${(yOfDelayUs(g, d) / sp.y) * 100}%`;
      right.appendChild(t);
    }
    right.appendChild(el("div", "title", `apparent depth (m, ε′ = ${META.permittivity})`));
  }
  const n = g.shape.ntrace;
  for (const tr of ticks(0, n - 1, Math.max(2, Math.round(w / 90)))) {
    if (tr !== Math.round(tr)) continue;
    const t = el("div", "tick", String(tr));
    t.style.left = `${((tr + 0.5) / sp.x) * 100}%`;
    bottom.appendChild(t);
  }
  bottom.appendChild(el("div", "title", view.grid === "obs" ? "observed trace" : "trace"));
}

function drawMapAxes() {
  const m = META.map, left = $("map-axis-left"), bottom = $("map-axis-bottom");
  const [west, east, south, north] = m.extent;
  left.replaceChildren(); bottom.replaceChildren();
  const ys = ticks(south, north, 4), yd = decimals(ys);
  for (const y of ys) {
    const t = el("div", "tick", minus(y.toFixed(yd)));
    t.style.top = `${((north - y) / (north - south)) * 100}%`;
    left.appendChild(t);
  }
  const xs = ticks(west, east, 4), xd = decimals(xs);
  for (const x of xs) {
    const t = el("div", "tick", minus(x.toFixed(xd)));
    t.style.left = `${((x - west) / (east - west)) * 100}%`;
    bottom.appendChild(t);
  }
  bottom.appendChild(el("div", "title", `${m.axis_labels[0]} · ${m.axis_labels[1]}`));
}

// ------------------------------------------------------------------ views

function legendFor(view) {
  const box = $("rg-legend"), g = gridOf(view);
  box.replaceChildren();
  if (view.legend === "power") {
    const stops = META.colours.power_ramp.map(([p, c]) => `${rgb(c)} ${p * 100}%`).join(", ");
    const unit = view.grid === "obs" ? "dB (observed unit)" : META.power_unit;
    box.append(el("span", "", minus(`${(g.vmax_db - g.range_db).toFixed(1)}`)));
    const bar = el("span", "bar"); bar.style.background = `linear-gradient(90deg, ${stops})`;
    box.append(bar, el("span", "", `${minus(g.vmax_db.toFixed(1))} ${unit}`));
  } else if (view.legend === "sides") {
    const s = META.colours.side;
    for (const [k, label] of [["left", "left of travel"], ["right", "right of travel"], ["nadir", "nadir strip"]]) {
      const item = el("span"); const sw = el("span", "sw"); sw.style.background = rgb(s[k]); sw.dataset.side = k;
      item.append(sw, label); box.append(item);
    }
    box.append(el("span", "", "· brightness: power"));
  } else if (view.legend === "overlay") {
    const o = META.colours.overlay;
    const both = [0, 1, 2].map((i) => Math.min(255, o.observed[i] + o.simulated[i]));
    for (const [c, label] of [[o.observed, "observed only"], [o.simulated, "simulated × gain only"], [both, "both"]]) {
      const item = el("span"); const sw = el("span", "sw"); sw.style.background = rgb(c);
      item.append(sw, label); box.append(item);
    }
  }
}

function setView(id) {
  const view = META.views.find((v) => v.id === id) || META.views[0];
  const changedGrid = !state.view || state.view.grid !== view.grid;
  state.view = view;
  for (const b of $("view-switch").children) b.setAttribute("aria-selected", String(b.dataset.view === view.id));
  $("rg-image").src = view.image;
  const g = gridOf(view), sp = span(g);
  const rows = g.shape.rows;
  $("rg-stage").style.setProperty("--stage-h", `${Math.round(Math.max(320, Math.min(rows * 3, 0.66 * window.innerHeight)))}px`);
  $("rg-lines").setAttribute("viewBox", `0 0 ${sp.x} ${sp.y}`);
  legendFor(view);
  drawAxes(view);
  drawLines();
  drawCandidateMarks();
  if (changedGrid && state.pinned && state.pinned.grid !== view.grid) unpin();
  refreshCross();
}

function drawLines() {
  const svg = $("rg-lines");
  svg.replaceChildren();
  const g = gridOf(state.view);
  if ($("show-nadir").checked) {
    let d = "", pen = false;
    g.traces.nadir_axis_us.forEach((v, t) => {
      if (v === null) { pen = false; return; }
      d += `${pen ? "L" : "M"}${t + 0.5},${yOfDelayUs(g, v).toFixed(3)} `;
      pen = true;
    });
    if (d) svg.appendChild(svgEl("path", { d, class: "nadir-line" }));
  }
  state.crossH = svgEl("line", { class: "cross", visibility: "hidden" });
  state.crossV = svgEl("line", { class: "cross", visibility: "hidden" });
  svg.append(state.crossH, state.crossV);
}

function drawCandidateMarks() {
  const box = $("rg-marks");
  box.replaceChildren();
  if (state.view.grid !== "obs") return;
  const g = gridOf(state.view), sp = span(g);
  META.candidates.forEach((c, i) => {
    if (c.grid_sample === null) return;
    const m = el("div", "cand-mark" + (state.chosenCandidate === i ? " chosen" : ""));
    m.style.left = `${((c.trace + 0.5) / sp.x) * 100}%`;
    m.style.top = `${((c.grid_sample + 0.5) / sp.y) * 100}%`;
    m.title = `candidate ${c.rank}`;
    box.appendChild(m);
  });
}

// ------------------------------------------------------------------ the probe

function pointerCell(ev) {
  const r = $("rg-stage").getBoundingClientRect();
  const s = gridOf(state.view).shape;
  const fx = (ev.clientX - r.left) / r.width, fy = (ev.clientY - r.top) / r.height;
  if (fx < 0 || fx >= 1 || fy < 0 || fy >= 1) return null;
  return { grid: state.view.grid, col: Math.min(s.columns - 1, Math.floor(fx * s.columns)), row: Math.min(s.rows - 1, Math.floor(fy * s.rows)) };
}

function simSource(t, k) {  // the simulated grid's record for trace t, sample k
  const g = META.grids.sim, s = g.shape;
  if (t < 0 || t >= s.ntrace) return null;
  const { col, row } = cellOf("sim", t, k);
  const c = cellSample("sim", col, row);
  const out = { t: c.t, k: c.k, idx: c.idx, power: value("sim.power_db", c.idx), below: isBelow("sim.power_db", c.idx) };
  out.left = value("sim.left", c.idx); out.right = value("sim.right", c.idx);
  if (g.sources) {
    const dlat = value("sim.src_dlat", c.idx), dlon = value("sim.src_dlon", c.idx);
    out.lat = g.traces.lat[c.t] + dlat; out.lon = g.traces.lon[c.t] + dlon;
    out.offnadir = value("sim.offnadir_m", c.idx);
    if (g.map_xy) { out.mapX = value("sim.src_map_x", c.idx); out.mapY = value("sim.src_map_y", c.idx); }
    else [out.mapX, out.mapY] = lonLatPixel(out.lon, out.lat);
  }
  if (g.centroids) {
    for (const k of ["left", "right"]) {
      out[`c_${k}_x`] = value(`sim.c_${k}_x`, c.idx); out[`c_${k}_y`] = value(`sim.c_${k}_y`, c.idx);
      out[`c_${k}_m`] = value(`sim.c_${k}_m`, c.idx);
    }
  }
  return out;
}

// The side a readout may name: one holding at least META.colours.side_majority of the power, else null
// (a mixed echo: only the shares are shown).
function sideOf(left, right) {
  if (!Number.isFinite(left) || !Number.isFinite(right)) return null;
  const shares = { left, right, nadir: Math.max(0, 1 - left - right) };
  let best = "left";
  for (const k of ["right", "nadir"]) if (shares[k] > shares[best]) best = k;
  return shares[best] >= META.colours.side_majority ? best : null;
}

function show(cell) {
  const fields = $("probe-fields");
  if (!cell) { fields.hidden = true; $("probe-empty").hidden = false; hideMapMarks(); return; }
  fields.hidden = false; $("probe-empty").hidden = true;
  const g = META.grids[cell.grid], s = g.shape;
  const c = cellSample(cell.grid, cell.col, cell.row);
  const tr = g.traces;
  $("probe-trace").textContent = String(c.t);
  $("probe-sample").textContent = String(c.k);
  const parts = [];
  if (s.trace_step > 1) parts.push(`traces ${cell.col * s.trace_step}–${Math.min(s.ntrace, (cell.col + 1) * s.trace_step) - 1}`);
  if (s.sample_step > 1) parts.push(`samples ${cell.row * s.sample_step}–${Math.min(s.nsample, (cell.row + 1) * s.sample_step) - 1}`);
  $("probe-block").textContent = parts.length ? `strongest of ${parts.join(", ")}` : "";
  const after = c.k * META.dt_us;
  const ws = tr.window_start_us[c.t];
  $("probe-delay").textContent = `${after.toFixed(3)} µs after window start`;
  $("probe-twoway").textContent = ws === null ? "" : `two-way ${(ws + after).toFixed(3)} µs`;
  const nadir = tr.nadir_us[c.t];
  $("probe-depth").textContent = nadir === null || ws === null ? "— (no nadir surface)"
    : `${minus(depthM(ws + after - nadir).toFixed(1))} m below the nadir surface (ε′ = ${META.permittivity})`;
  let src;
  if (cell.grid === "sim") {
    const p = value("sim.power_db", c.idx);
    $("probe-power").textContent = Number.isNaN(p) ? "no data" : isBelow("sim.power_db", c.idx)
      ? `below ${minus(g.power_floor_db.toFixed(1))} ${META.power_unit}` : `${minus(p.toFixed(2))} ${META.power_unit}`;
    src = simSource(c.t, c.k);
    $("probe-compare").textContent = "";
  } else {
    const po = value("obs.power_db", c.idx), ps = value("obs.sim_db", c.idx), f = ARR["obs.flags"][c.idx];
    $("probe-power").textContent = Number.isNaN(po) ? "no data (unmatched trace)" : `${minus(po.toFixed(2))} dB observed`;
    const status = f & 2 ? "detected, explained" : f & 1 ? "detected, unexplained" : "not detected";
    $("probe-compare").textContent = Number.isNaN(ps) ? "—" : `simulated × gain ${minus(ps.toFixed(2))} dB · ${status}`;
    const st = tr.sim_trace[c.t];
    src = st >= 0 ? simSource(st, c.k) : null;
    if (src) $("probe-compare").textContent += ` · simulated trace ${src.t}`;
  }
  const known = src && Number.isFinite(src.left) && Number.isFinite(src.right);
  const side = known ? sideOf(src.left, src.right) : null;
  const sideEl = $("probe-side");
  sideEl.textContent = !known ? "—" : side ? META.colours.side_words[side] : "mixed: no side holds most of the power";
  sideEl.className = side ? `side-${side}` : "";
  const shares = $("probe-shares");
  shares.replaceChildren();
  if (known) {
    const parts = [["left", src.left], ["right", src.right], ["nadir", Math.max(0, 1 - src.left - src.right)]];
    parts.forEach(([k, v], i) => {
      const span = el("span", `share side-${k}`, `${k === "nadir" ? "nadir strip" : k} ${(100 * v).toFixed(0)} %`);
      span.dataset.side = k;
      if (k !== "nadir" && Number.isFinite(src[`c_${k}_m`])) span.textContent += ` (centre ${distText(src[`c_${k}_m`])} from nadir)`;
      if (i) shares.append(" · ");
      shares.append(span);
    });
  }
  const hasSrc = src && Number.isFinite(src.lat);
  $("probe-src-lat").textContent = hasSrc ? latText(src.lat) : (META.grids.sim.sources ? "no echo" : "no source record");
  $("probe-src-lon").textContent = hasSrc ? lonText(src.lon) : "";
  $("probe-offnadir").textContent = hasSrc ? `${distText(src.offnadir)} from nadir` : "—";
  $("probe-antenna").textContent = `${latText(tr.lat[c.t])} ${lonText(tr.lon[c.t])}`;
  const probe = $("probe");
  probe.dataset.trace = c.t; probe.dataset.sample = c.k;
  markMap(tr.map_x[c.t], tr.map_y[c.t], hasSrc ? src.mapX : NaN, hasSrc ? src.mapY : NaN, src);
}

function refreshCross() {
  const cell = state.pinned || state.hover;
  if (!state.crossH) return;
  if (!cell || cell.grid !== state.view.grid) {
    state.crossH.setAttribute("visibility", "hidden"); state.crossV.setAttribute("visibility", "hidden"); return;
  }
  const s = gridOf(state.view).shape, sp = span(gridOf(state.view));
  const x = (cell.col + 0.5) * s.trace_step, y = (cell.row + 0.5) * s.sample_step;
  for (const [line, a] of [[state.crossH, { x1: 0, x2: sp.x, y1: y, y2: y }], [state.crossV, { x1: x, x2: x, y1: 0, y2: sp.y }]]) {
    for (const k in a) line.setAttribute(k, a[k]);
    line.setAttribute("visibility", "visible");
    line.setAttribute("class", state.pinned ? "cross pinned" : "cross");
  }
}

function pin(cell) {
  state.pinned = cell;
  $("probe").classList.add("pinned");
  show(cell); refreshCross();
}
function unpin() {
  state.pinned = null;
  $("probe").classList.remove("pinned");
  show(state.hover); refreshCross();
}
const sameCell = (a, b) => a && b && a.grid === b.grid && a.col === b.col && a.row === b.row;

// ------------------------------------------------------------------ map

// a geographic map: x = longitude wrapped onto the map (as cluttersim.products.MapFrame.xy), y = latitude
function lonLatPixel(lon, lat) {
  const m = META.map, [west, east, south, north] = m.extent;
  const x = ((((lon - west) % 360) + 360) % 360);
  return [(x / (east - west)) * m.width, ((north - lat) / (north - south)) * m.height];
}
function mapPct(x, y) { return [(x / META.map.width) * 100, (y / META.map.height) * 100]; }
function drawMap() {
  const m = META.map;
  $("map-image").src = m.image;
  const stage = $("map-stage");
  stage.style.aspectRatio = `${m.width * m.aspect} / ${m.height}`;
  const svg = $("map-lines");
  svg.setAttribute("viewBox", `0 0 ${m.width} ${m.height}`);
  const tr = META.grids.sim.traces;
  let d = "", pen = false, first = -1;
  tr.map_x.forEach((x, i) => {
    const y = tr.map_y[i];
    if (x === null || y === null) { pen = false; return; }
    if (first < 0) first = i;
    d += `${pen ? "L" : "M"}${x.toFixed(2)},${y.toFixed(2)} `; pen = true;
  });
  svg.replaceChildren(svgEl("path", { d, class: "track-halo" }), svgEl("path", { d, class: "track-line" }));
  state.link = svgEl("line", { class: "link-line", visibility: "hidden" });
  svg.appendChild(state.link);
  const marks = $("map-marks");
  if (first >= 0) {
    const s = el("div", "start-mark", "start");
    const [px, py] = mapPct(tr.map_x[first], tr.map_y[first]);
    s.style.left = `${px}%`; s.style.top = `${py}%`;
    marks.appendChild(s);
  }
  state.antMark = el("div", "ant-mark"); state.srcMark = el("div", "src-mark");
  state.cMarks = { left: el("div", "c-mark side-left-mark"), right: el("div", "c-mark side-right-mark") };
  state.antMark.hidden = state.srcMark.hidden = state.cMarks.left.hidden = state.cMarks.right.hidden = true;
  marks.append(state.cMarks.left, state.cMarks.right, state.antMark, state.srcMark);
  const e = m.elevation_m;
  $("map-note").textContent = `Shaded relief, light from the north-west${e ? `; heights ${minus(e[0].toFixed(0))} to ${minus(e[1].toFixed(0))} m (sage low, sand high)` : ""}.`;
  drawMapAxes();
}
function hideMapMarks() {
  if (!state.antMark) return;
  state.antMark.hidden = state.srcMark.hidden = state.cMarks.left.hidden = state.cMarks.right.hidden = true;
  state.link.setAttribute("visibility", "hidden");
}
function markMap(ax, ay, sx, sy, src) {
  for (const k of ["left", "right"]) {  // each side's power-weighted centre, where that side echoes
    const m = state.cMarks[k], x = src ? src[`c_${k}_x`] : NaN, y = src ? src[`c_${k}_y`] : NaN;
    const share = src ? src[k] : NaN;
    m.hidden = !(Number.isFinite(x) && Number.isFinite(y) && share > 0.005);
    if (!m.hidden) {
      const [px, py] = mapPct(x, y); m.style.left = `${px}%`; m.style.top = `${py}%`;
      const size = 8 + 14 * Math.sqrt(Math.min(1, share));  // area grows with the side's share
      m.style.width = m.style.height = `${size}px`; m.style.margin = `${-size / 2}px 0 0 ${-size / 2}px`;
      m.title = `${k} of track: centre of its echo power (${(100 * share).toFixed(0)} %)`;
    }
  }
  const okA = ax !== null && ay !== null && Number.isFinite(ax) && Number.isFinite(ay);
  const okS = Number.isFinite(sx) && Number.isFinite(sy);
  state.antMark.hidden = !okA; state.srcMark.hidden = !okS;
  if (okA) { const [x, y] = mapPct(ax, ay); state.antMark.style.left = `${x}%`; state.antMark.style.top = `${y}%`; }
  if (okS) { const [x, y] = mapPct(sx, sy); state.srcMark.style.left = `${x}%`; state.srcMark.style.top = `${y}%`; }
  if (okA && okS) {
    for (const [k, v] of [["x1", ax], ["y1", ay], ["x2", sx], ["y2", sy]]) state.link.setAttribute(k, v);
    state.link.setAttribute("visibility", "visible");
  } else state.link.setAttribute("visibility", "hidden");
}

// ------------------------------------------------------------------ tables

const CAND_COLS = [
  ["rank", "rank", 0], ["trace", "trace", 0], ["delay_us", "delay (µs)", 3], ["depth_m", "depth (m)", 1],
  ["lat", "antenna lat (°)", 5], ["lon", "antenna lon (°)", 5], ["snr_db", "SNR (dB)", 1], ["excess_db", "excess (dB)", 1],
  ["unexplained_share", "unexplained", 2], ["continuity", "continuity", 2], ["score", "score", 2], ["sim_trace", "sim trace", 0],
];
function drawCandidates() {
  if (META.kind !== "comparison") return;
  $("candidates-card").hidden = false;
  const table = $("candidates");
  const head = el("thead"), hr = el("tr");
  CAND_COLS.forEach(([key, label]) => {
    const th = el("th", "", label);
    th.dataset.key = key;
    th.addEventListener("click", () => sortCandidates(key));
    hr.appendChild(th);
  });
  head.appendChild(hr);
  const body = el("tbody");
  table.replaceChildren(head, body);
  if (!META.candidates.length) {
    const tr = el("tr"), td = el("td", "", "no unexplained echo above the threshold");
    td.colSpan = CAND_COLS.length; td.style.textAlign = "left"; tr.appendChild(td); body.appendChild(tr);
    return;
  }
  state.sort = { key: "rank", dir: 1 };
  renderCandidateRows();
}
function sortCandidates(key) {
  state.sort = { key, dir: state.sort.key === key ? -state.sort.dir : 1 };
  renderCandidateRows();
}
function renderCandidateRows() {
  const body = $("candidates").tBodies[0];
  const order = META.candidates.map((c, i) => i);
  const { key, dir } = state.sort;
  order.sort((a, b) => dir * ((META.candidates[a][key] ?? -Infinity) - (META.candidates[b][key] ?? -Infinity)));
  for (const th of $("candidates").tHead.rows[0].cells) {
    th.setAttribute("aria-sort", th.dataset.key === key ? (dir > 0 ? "ascending" : "descending") : "none");
  }
  body.replaceChildren(...order.map((i) => {
    const c = META.candidates[i], tr = el("tr");
    if (state.chosenCandidate === i) tr.className = "chosen";
    tr.dataset.index = i;
    for (const [k, , d] of CAND_COLS) tr.appendChild(el("td", "", minus(Number(c[k]).toFixed(d))));
    tr.addEventListener("click", () => jumpToCandidate(i));
    return tr;
  }));
}
function jumpToCandidate(i) {
  const c = META.candidates[i];
  state.chosenCandidate = i;
  if (state.view.grid !== "obs") setView("observed");
  renderCandidateRows();
  drawCandidateMarks();
  if (c.grid_sample !== null) {
    const { col, row } = cellOf("obs", c.trace, Math.max(0, Math.min(META.grids.obs.shape.nsample - 1, c.grid_sample)));
    pin({ grid: "obs", col, row });
  }
  $("rg-stage").scrollIntoView({ block: "center", behavior: "smooth" });
}

function drawParams() {
  const box = $("params");
  for (const sec of META.params) {
    const t = el("table"); t.appendChild(el("caption", "", sec.title));
    const tb = el("tbody");
    for (const [k, v] of sec.rows) { const tr = el("tr"); tr.append(el("th", "", k), el("td", "", v)); tb.appendChild(tr); }
    t.appendChild(tb); box.appendChild(t);
  }
  const ol = $("cautions");
  for (const text of META.cautions) ol.appendChild(el("li", "", text));
}

// ------------------------------------------------------------------ start

function header() {
  document.body.classList.add(`kind-${META.kind}`);
  $("run-title").textContent = META.title;
  const s = META.grids.sim.shape;
  const what = META.kind === "comparison"
    ? `comparison with observed data · ${META.grids.obs.shape.ntrace} observed traces, ${META.candidates.length} candidates`
    : "simulation";
  $("run-sub").textContent = `${what} · ${s.ntrace} simulated traces × ${s.nsample} samples of ${(META.dt_us * 1000).toFixed(1)} ns · ε′ = ${META.permittivity}`;
  $("foot").textContent = `made by cluttersim on ${META.generated_utc}; everything on this page is inside this one file`;
}

function wire() {
  const sw = $("view-switch");
  for (const v of META.views) {
    const b = el("button", "", v.label);
    b.type = "button"; b.dataset.view = v.id; b.setAttribute("role", "tab");
    b.addEventListener("click", () => setView(v.id));
    sw.appendChild(b);
  }
  $("show-nadir").addEventListener("change", () => { drawLines(); refreshCross(); });
  const stage = $("rg-stage");
  stage.addEventListener("pointermove", (ev) => {
    if (document.body.dataset.ready !== "1") return;
    const cell = pointerCell(ev);
    if (sameCell(cell, state.hover)) return;  // still in the same cell: nothing to redraw
    state.hover = cell;
    if (!state.pinned) show(state.hover);
    refreshCross();
  });
  stage.addEventListener("pointerleave", () => { state.hover = null; if (!state.pinned) show(null); refreshCross(); });
  stage.addEventListener("click", (ev) => {
    if (document.body.dataset.ready !== "1") return;
    const cell = pointerCell(ev);
    if (!cell) return;
    if (sameCell(cell, state.pinned)) unpin(); else pin(cell);
  });
  document.addEventListener("keydown", (ev) => { if (ev.key === "Escape" && state.pinned) unpin(); });
  window.addEventListener("resize", () => { setView(state.view.id); });
}

async function start() {
  header();
  wire();
  drawMap();
  drawParams();
  drawCandidates();
  setView(META.views[0].id);
  if (typeof DecompressionStream === "undefined") {
    $("status").textContent = "This browser cannot unpack the embedded data (no DecompressionStream); the pointer readout is off.";
    return;
  }
  try {
    for (const name of Object.keys(BLOBS)) ARR[name] = await unpack(BLOBS[name]);
  } catch (err) {
    $("status").textContent = `The embedded data could not be unpacked (${err}); the pointer readout is off.`;
    return;
  }
  document.body.dataset.ready = "1";
  $("status").textContent = "Point at the radargram to read an echo; click to pin, Esc to release.";
}

start();

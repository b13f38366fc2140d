// placer sequence lesson page: exchange two slots of a unary (or segmented) array and
// watch its INL. The formulas mirror placer/model/unary.py: code C = U 2^b + L turns on
// the first U unary cells and the binary cells of L's bits; the INL at C is the sum of the
// active sub-units' centred errors over k (the sub-units of an LSB); the worst over every
// code and gradient direction is max_C (g |D_C| + |Q_C|).
"use strict";

const D = JSON.parse(document.getElementById("lesson-data").textContent);
const SVGNS = "http://www.w3.org/2000/svg";
const ROWS = D.rows, COLS = D.cols, N = D.cells, NB = D.binary_bits, K = D.lsb_units;

const state = { grid: null, history: [], selected: null, focus: 0, loaded: 0, step: 0 };

// ---------------------------------------------------------------- the model
// slot centres about the core's centre (um); b: the field but the linear gradient (the
// bowl, and a hot spot when the spec gives one), ppm, as placer computes it
const XY = (() => {
  const [px, py] = D.pitch_um;
  const x = new Float64Array(ROWS * COLS), y = new Float64Array(ROWS * COLS);
  const b = Float64Array.from(D.field_ppm);
  for (let s = 0; s < ROWS * COLS; s++) {
    const r = Math.floor(s / COLS), c = s % COLS;
    x[s] = (c - (COLS - 1) / 2) * px;
    y[s] = -(r - (ROWS - 1) / 2) * py;
  }
  return { x, y, b };
})();

function score(grid) {
  let mx = 0, my = 0, mb = 0, na = 0;
  for (let s = 0; s < grid.length; s++) {
    if (grid[s] !== 0) { mx += XY.x[s]; my += XY.y[s]; mb += XY.b[s]; na++; }
  }
  mx /= na; my /= na; mb /= na;
  const cell = new Float64Array(3 * (N + 1)), bit = new Float64Array(3 * Math.max(NB, 1));
  for (let s = 0; s < grid.length; s++) {
    const v = grid[s];
    if (v === 0) continue;
    const at = v > 0 ? cell : bit, i = 3 * (v > 0 ? v : -v - 1);
    at[i] += XY.x[s] - mx; at[i + 1] += XY.y[s] - my; at[i + 2] += XY.b[s] - mb;
  }
  const nLow = 1 << NB, codes = (N + 1) * nLow;
  const low = new Float64Array(3 * nLow);
  for (let l = 0; l < nLow; l++) {
    for (let j = 0; j < NB; j++) {
      if ((l >> j) & 1) for (let t = 0; t < 3; t++) low[3 * l + t] += bit[3 * j + t];
    }
  }
  const dx = new Float64Array(codes), dy = new Float64Array(codes), dq = new Float64Array(codes);
  let px = 0, py = 0, pq = 0;
  for (let u = 0; u <= N; u++) {
    if (u > 0) { px += cell[3 * u]; py += cell[3 * u + 1]; pq += cell[3 * u + 2]; }
    for (let l = 0; l < nLow; l++) {
      const c = u * nLow + l;
      dx[c] = (px + low[3 * l]) / K; dy[c] = (py + low[3 * l + 1]) / K;
      dq[c] = (pq + low[3 * l + 2]) / K;
    }
  }
  const g = D.linear_ppm_per_um;
  const lin = new Float64Array(codes), bowl = new Float64Array(codes);
  let worst = -1, code = 0;
  for (let c = 0; c < codes; c++) {
    lin[c] = 1e-6 * g * Math.hypot(dx[c], dy[c]);
    bowl[c] = 1e-6 * dq[c];
    const t = lin[c] + Math.abs(bowl[c]);
    if (t > worst) { worst = t; code = c; }
  }
  const sign = bowl[code] >= 0 ? 1 : -1;
  const theta = Math.hypot(dx[code], dy[code]) > 0
    ? Math.atan2(sign * dy[code], sign * dx[code]) : 0;
  const ct = Math.cos(theta), st = Math.sin(theta);
  const curve = new Float64Array(codes);
  let dnl = 0, linMax = 0, bowlMax = 0;
  for (let c = 0; c < codes; c++) {
    curve[c] = 1e-6 * (g * (dx[c] * ct + dy[c] * st) + dq[c]);
    if (c > 0) dnl = Math.max(dnl, Math.abs(curve[c] - curve[c - 1]));
    linMax = Math.max(linMax, lin[c]);
    bowlMax = Math.max(bowlMax, Math.abs(bowl[c]));
  }
  const deg = ((theta * 180 / Math.PI) % 360 + 360) % 360;
  return { worst, code, deg, curve, lin, bowl, dnl, linMax, bowlMax };
}

// ---------------------------------------------------------------- state
function load(k) {
  state.grid = D.arrangements[k].grid.flat();
  state.loaded = k;
  state.history = [];
  state.selected = null;
  render();
  say(`Loaded ${D.arrangements[k].label}: ${D.arrangements[k].note}.`);
}

function exchange(a, b) {
  const g = state.grid;
  if (g[a] === g[b]) { say("Both slots hold the same cell: nothing changes."); render(); return; }
  [g[a], g[b]] = [g[b], g[a]];
  state.history.push([a, b]);
  render();
  say(`Exchanged ${where(a)} and ${where(b)}.`);
}

function undo() {
  const last = state.history.pop();
  if (!last) { say("Nothing to undo."); return; }
  const g = state.grid;
  [g[last[0]], g[last[1]]] = [g[last[1]], g[last[0]]];
  render();
  say("Undone.");
}

function where(s) { return `row ${Math.floor(s / COLS)}, column ${s % COLS}`; }
function say(text) { document.getElementById("status").textContent = text; }
function token(v) { return v === 0 ? "." : v > 0 ? String(v) : `b${-v - 1}`; }

function fmt(v) {
  // below a billionth of a ppm, um or LSB a figure is the arithmetic's rounding: show 0
  if (Math.abs(v) < 1e-9) return "0";
  const a = Math.abs(v);
  if (a >= 1e4 || a < 1e-3) return v.toExponential(3);
  return Number(v.toPrecision(4)).toString();
}

function el(tag, attrs = {}, text = null, ns = null) {
  const e = ns ? document.createElementNS(ns, tag) : document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, v);
  if (text !== null) e.textContent = text;
  return e;
}

// ---------------------------------------------------------------- drawing
// a perceptually ordered ramp (dark blue -> green -> yellow), first cell darkest
const RAMP = [[68, 1, 84], [59, 82, 139], [33, 145, 140], [94, 201, 98], [253, 231, 37]];
function rampColour(f) {
  const t = Math.min(1, Math.max(0, f)) * (RAMP.length - 1), i = Math.min(RAMP.length - 2, Math.floor(t));
  const a = RAMP[i], b = RAMP[i + 1], u = t - i;
  return `rgb(${a.map((v, k) => Math.round(v + (b[k] - v) * u)).join(",")})`;
}

function fill(v) {
  if (v > 0) return rampColour(N > 1 ? (v - 1) / (N - 1) : 0);
  if (v < 0) { const grey = 225 - Math.round(120 * (-v - 1) / Math.max(1, NB - 1)); return `rgb(${grey},${grey},${grey})`; }
  return "#ffffff";
}

function drawArray() {
  const [px, py] = D.pitch_um;
  const scale = Math.max(10 / Math.min(px, py),
    Math.min(560 / (COLS * px), 520 / (ROWS * py), 60 / Math.min(px, py)));
  const w = px * scale, h = py * scale, m = 6;
  const W = COLS * w + 2 * m, H = ROWS * h + 2 * m;
  const svg = el("svg", { viewBox: `0 0 ${W} ${H}`, width: W, height: H, role: "grid",
    "aria-label": `Array of ${ROWS} rows and ${COLS} columns` }, null, SVGNS);
  const chars = Math.max(String(N).length, NB ? 2 : 1);
  const size = Math.min(13, w / (0.62 * chars + 0.6), h * 0.6);
  for (let r = 0; r < ROWS; r++) {
    const rowG = el("g", { role: "row" }, null, SVGNS);
    for (let c = 0; c < COLS; c++) {
      const s = r * COLS + c, v = state.grid[s];
      const x = m + c * w, y = m + r * h;
      const what = v > 0 ? `cell ${v}` : v < 0 ? `binary bit ${-v - 1}` : "dummy";
      const g = el("g", { class: "slot", role: "gridcell", "data-row": r, "data-col": c,
        "data-value": token(v), tabindex: s === state.focus ? 0 : -1,
        "aria-label": `row ${r}, column ${c}: ${what}` }, null, SVGNS);
      if (state.selected === s) { g.classList.add("selected"); g.setAttribute("aria-selected", "true"); }
      g.appendChild(el("rect", { x: x + 0.5, y: y + 0.5, width: w - 1, height: h - 1, fill: fill(v),
        stroke: "#222", "stroke-width": 0.6, class: "frame" }, null, SVGNS));
      if (size >= 7) {
        const light = v > 0 && (v - 1) < 0.6 * (N - 1);
        g.appendChild(el("text", { x: x + w / 2, y: y + h / 2 + size * 0.35, "text-anchor": "middle",
          "font-size": size, fill: light ? "#fff" : "#000", "pointer-events": "none" }, token(v), SVGNS));
      }
      g.addEventListener("click", () => pick(s));
      rowG.appendChild(g);
    }
    svg.appendChild(rowG);
  }
  document.getElementById("array").replaceChildren(svg);
  svg.addEventListener("keydown", keys);
}

function pick(s) {
  state.focus = s;
  if (state.selected === null) {
    state.selected = s;
    render();
    say(`Selected ${where(s)}; pick the slot to exchange it with.`);
  } else if (state.selected === s) {
    state.selected = null;
    render();
    say("Selection cleared.");
  } else {
    const a = state.selected;
    state.selected = null;
    exchange(a, s);
  }
  focusSlot();
}

function focusSlot() {
  const s = document.querySelector(
    `.slot[data-row="${Math.floor(state.focus / COLS)}"][data-col="${state.focus % COLS}"]`);
  if (s) s.focus();
}

function keys(ev) {
  let r = Math.floor(state.focus / COLS), c = state.focus % COLS;
  const moves = { ArrowUp: [-1, 0], ArrowDown: [1, 0], ArrowLeft: [0, -1], ArrowRight: [0, 1] };
  if (moves[ev.key]) {
    r = Math.min(ROWS - 1, Math.max(0, r + moves[ev.key][0]));
    c = Math.min(COLS - 1, Math.max(0, c + moves[ev.key][1]));
    state.focus = r * COLS + c;
    document.querySelectorAll(".slot").forEach((e) => e.setAttribute("tabindex", -1));
    const e = document.querySelector(`.slot[data-row="${r}"][data-col="${c}"]`);
    if (e) { e.setAttribute("tabindex", 0); e.focus(); }
    ev.preventDefault();
  } else if (ev.key === "Enter" || ev.key === " ") {
    pick(state.focus);
    ev.preventDefault();
  } else if (ev.key === "Escape") {
    state.selected = null; render(); focusSlot();
  } else if (ev.key === "u" || ev.key === "z") {
    undo(); focusSlot();
  }
}

function figureRow(table, label, value, key, shown) {
  const tr = el("tr");
  tr.appendChild(el("td", {}, label));
  tr.appendChild(el("td", { "data-figure": key, "data-value": String(value) }, shown));
  table.appendChild(tr);
}

function drawFigures(sc) {
  const t = document.getElementById("worst");
  t.replaceChildren();
  figureRow(t, "worst |INL| (LSB)", sc.worst, "worst_inl_lsb", fmt(sc.worst));
  figureRow(t, "at code", sc.code, "worst_code", String(sc.code));
  figureRow(t, "gradient direction (deg)", sc.deg, "worst_direction_deg", sc.deg.toFixed(0));
  figureRow(t, "linear part, worst (LSB)", sc.linMax, "linear_part_max_lsb", fmt(sc.linMax));
  figureRow(t, "bowl part, worst (LSB)", sc.bowlMax, "bowl_part_max_lsb", fmt(sc.bowlMax));
  figureRow(t, "|DNL|, worst (LSB)", sc.dnl, "max_dnl_lsb", fmt(sc.dnl));
  const first = score(D.arrangements[0].grid.flat()).worst;
  if (state.loaded !== 0 || state.history.length) {
    figureRow(t, `against ${D.arrangements[0].label}`, first > 0 ? sc.worst / first : 0,
      "against_first", first > 0 ? `${fmt(sc.worst / first)} x` : "-");
  }
}

function drawInl(sc) {
  const W = 460, H = 230, L = 52, R = 8, T = 10, B = 30;
  const codes = sc.curve.length;
  let top = 0;
  for (let c = 0; c < codes; c++) top = Math.max(top, Math.abs(sc.curve[c]), sc.lin[c], Math.abs(sc.bowl[c]));
  top = top > 0 ? 1.15 * top : 1;
  const X = (c) => L + (W - L - R) * c / Math.max(1, codes - 1);
  const Y = (v) => T + (H - T - B) * (1 - (v + top) / (2 * top));
  const svg = el("svg", { viewBox: `0 0 ${W} ${H}`, width: W, height: H, role: "img",
    "aria-label": `INL against code; worst ${fmt(sc.worst)} LSB at code ${sc.code}` }, null, SVGNS);
  svg.appendChild(el("line", { x1: L, y1: Y(0), x2: W - R, y2: Y(0), class: "axis" }, null, SVGNS));
  svg.appendChild(el("line", { x1: L, y1: T, x2: L, y2: H - B, class: "axis" }, null, SVGNS));
  const path = (arr, cls, abs) => {
    let d = "";
    for (let c = 0; c < codes; c++) d += `${c ? "L" : "M"}${X(c).toFixed(1)},${Y(abs ? Math.abs(arr[c]) : arr[c]).toFixed(1)}`;
    svg.appendChild(el("path", { d, class: cls }, null, SVGNS));
  };
  path(sc.lin, "linear", false);
  path(sc.bowl, "bowl", false);
  path(sc.curve, "curve", false);
  svg.appendChild(el("circle", { cx: X(sc.code), cy: Y(sc.curve[sc.code]), r: 3.5, fill: "#D00000" }, null, SVGNS));
  for (const v of [-top / 1.15, 0, top / 1.15]) {
    svg.appendChild(el("text", { x: L - 4, y: Y(v) + 3, "text-anchor": "end" }, fmt(v), SVGNS));
  }
  svg.appendChild(el("text", { x: L, y: H - 8 }, "0", SVGNS));
  svg.appendChild(el("text", { x: W - R, y: H - 8, "text-anchor": "end" }, `code ${codes - 1}`, SVGNS));
  document.getElementById("inl").replaceChildren(svg);
}

function drawControls() {
  const box = document.getElementById("controls");
  box.replaceChildren();
  D.arrangements.forEach((a, k) => {
    const b = el("button", { type: "button", "data-load": k, title: a.note,
      "aria-pressed": String(k === state.loaded && !state.history.length) }, a.label);
    b.addEventListener("click", () => load(k));
    box.appendChild(b);
  });
  const u = el("button", { type: "button", id: "undo" }, "Undo");
  u.addEventListener("click", undo);
  box.appendChild(u);
}

function drawScale() {
  const box = document.getElementById("scale");
  const ramp = el("span", { class: "ramp" });
  ramp.style.background = `linear-gradient(to right, ${[0, 0.25, 0.5, 0.75, 1].map(rampColour).join(", ")})`;
  box.replaceChildren(el("span", {}, "cell 1"), ramp, el("span", {}, `cell ${N}`));
  if (NB) box.appendChild(el("span", {}, `; greys: binary bits b0 (LSB) to b${NB - 1}; white: dummy`));
  else box.appendChild(el("span", {}, "; white: dummy"));
}

function gridText() {
  const width = Math.max(String(N).length, NB ? 2 : 1);
  const lines = [`# ${D.name}: sequence grid from the lesson page (${state.history.length} exchanges after ${D.arrangements[state.loaded].label})`];
  for (let r = 0; r < ROWS; r++) {
    lines.push(state.grid.slice(r * COLS, (r + 1) * COLS).map((v) => token(v).padStart(width)).join(" "));
  }
  return lines.join("\n") + "\n";
}

function exportGrid() {
  const text = gridText();
  document.getElementById("export-text").value = text;
  document.getElementById("download").href = "data:text/plain;charset=utf-8," + encodeURIComponent(text);
}

// ---------------------------------------------------------------- the guide
const STEPS = [
  ["Why the order matters", [
    "Input code c turns on the first c cells. Each cell's value carries the field where its sub-units sit; the output at code c is the sum of the cells switched on, and with the end points fitted the INL is how far that sum strays from a straight line.",
    "Under a linear gradient the INL at code c is the gradient times the partial sum of the cells' positions measured from the array's centre: an order whose early cells all sit on one side builds a large partial sum."]],
  ["Row by row", [
    "Load <b>row-by-row</b>. The first rows sit on one side of the centre, so the partial sums grow until half the cells are on: the INL arches. Along one row of N cells at pitch p the arch reaches g p N&sup2; / 8 at mid-scale.",
    "Try exchanging a cell of the first rows with one of the last and watch the worst code move."]],
  ["Orders from the centre out", [
    "<b>row-column</b> takes rows from the middle outwards, alternately above and below; <b>centre pairs</b> turns on consecutive cells on slots mirrored through the centre, so each pair's gradient cancels and the partial sums stay within one cell's offset.",
    "The bowl (a curvature that grows with the distance from the centre) is not cancelled by mirroring: cells near the centre and cells at the rim differ, and an order that takes the centre first tilts the INL."]],
  ["The worst direction", [
    "The gradient's direction is unknown, so the page takes the worst one: g |D<sub>c</sub>| + |Q<sub>c</sub>| at every code, D<sub>c</sub> the partial sum of centred positions and Q<sub>c</sub> that of the bowl. The black curve is the INL with the gradient in the direction that makes the worst code worst.",
    "Load <b>placer</b>: its search exchanges sub-units until every partial sum is small in every direction at once."]],
  ["Segmented arrays and sub-units", [
    "A cell may be split into sub-units spread over the array; a segmented DAC adds binary cells (greys) for its low bits, whose sums join every code. The same rule holds: every partial sum of what is switched on should stay near the centre.",
    "Export the board and grade it with <code>placer sequence SPEC --grid sequence.txt</code>: the figures agree with the page's."]],
];

function drawStep() {
  const [title, paras] = STEPS[state.step];
  document.getElementById("step-title").textContent = title;
  const box = document.getElementById("step-text");
  box.replaceChildren();
  for (const p of paras) { const e = el("p"); e.innerHTML = p; box.appendChild(e); }
  document.getElementById("step-count").textContent = `${state.step + 1} / ${STEPS.length}`;
}

// ---------------------------------------------------------------- wiring up
function render() {
  const sc = score(state.grid);
  drawArray();
  drawFigures(sc);
  drawInl(sc);
  drawControls();
  document.body.dataset.swaps = String(state.history.length);
}

const bits = NB ? ` + ${NB} binary bits` : "";
document.getElementById("title").textContent =
  `${D.name}: ${N} unary cells x ${D.sub_units} sub-unit${D.sub_units > 1 ? "s" : ""}${bits} on ${ROWS} x ${COLS}`;
document.getElementById("step-back").addEventListener("click", () => { state.step = Math.max(0, state.step - 1); drawStep(); });
document.getElementById("step-next").addEventListener("click", () => { state.step = Math.min(STEPS.length - 1, state.step + 1); drawStep(); });
document.getElementById("export").addEventListener("click", exportGrid);
drawScale();
drawStep();
load(0);
document.body.dataset.ready = "true";

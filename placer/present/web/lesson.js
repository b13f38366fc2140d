// placer lesson page: swap units, recompute every figure with grade's formulas.
// The formulas mirror placer/model/exact_moments.py (exact integer moments, here in BigInt),
// placer/model/variation.py (worst linear and quadratic errors, the correlated field, the area
// law) and placer/model/budget.py (ratio budget, capacitor-array INL and DNL).
"use strict";

const D = JSON.parse(document.getElementById("lesson-data").textContent);
const DUMMY = -1, EMPTY = -2;
const SVGNS = "http://www.w3.org/2000/svg";

// ---------------------------------------------------------------- state
const state = {
  ids: null, orient: null, history: [], selected: null, focus: [0, 0],
  loaded: 0, reference: null, step: 0,
};

function copyGrid(g) { return g.map((row) => row.slice()); }

function load(k) {
  const a = D.arrangements[k];
  state.ids = copyGrid(a.ids);
  state.orient = copyGrid(a.orient);
  state.history = [];
  state.selected = null;
  state.loaded = k;
  state.reference = score(state.ids);
  render();
  say(`Loaded ${a.label}: ${a.note}`);
}

function swap(a, b) {
  const [r1, c1] = a, [r2, c2] = b;
  if (state.ids[r1][c1] === state.ids[r2][c2] && state.orient[r1][c1] === state.orient[r2][c2]) {
    say("Both slots hold the same thing: nothing to swap.");
    return;
  }
  state.history.push([copyGrid(state.ids), copyGrid(state.orient)]);
  for (const g of [state.ids, state.orient]) {
    const t = g[r1][c1]; g[r1][c1] = g[r2][c2]; g[r2][c2] = t;
  }
  render();
  const s = score(state.ids);
  say(`Swapped row ${r1}, column ${c1} with row ${r2}, column ${c2}. ` +
      `Worst linear error now ${fmt(s.worst.linear.value)} ppm.`);
}

function undo() {
  if (!state.history.length) { say("Nothing to undo."); return; }
  [state.ids, state.orient] = state.history.pop();
  state.selected = null;
  render();
  say("Undone.");
}

function say(text) { document.getElementById("status").textContent = text; }

// ---------------------------------------------------------------- the model
function units(ids) {
  const out = [];
  ids.forEach((row, r) => row.forEach((d, c) => { if (d >= 0) out.push([r, c, d]); }));
  return out;
}

// per device, as BigInt: n, sum u, sum v, sum uu, sum uv, sum vv with u = column, v = -row
function gridSums(us, nDev) {
  const s = Array.from({ length: nDev }, () => [0n, 0n, 0n, 0n, 0n, 0n]);
  for (const [r, c, d] of us) {
    const u = BigInt(c), v = BigInt(-r);
    const t = s[d];
    t[0] += 1n; t[1] += u; t[2] += v; t[3] += u * u; t[4] += u * v; t[5] += v * v;
  }
  return s;
}

function pairTerms(s, a, b, px, py) {
  const na = s[a][0], nb = s[b][0];
  const tot = [0n, 0n, 0n, 0n, 0n, 0n];
  for (const t of s) for (let k = 0; k < 6; k++) tot[k] += t[k];
  const d1 = [nb * s[a][1] - na * s[b][1], nb * s[a][2] - na * s[b][2]];
  const den = Number(na * nb);
  const dc = [Number(d1[0]) * px / den, Number(d1[1]) * py / den];
  const s2 = [3, 4, 5].map((k) => nb * s[a][k] - na * s[b][k]);
  const nAll = tot[0], tx = tot[1], ty = tot[2];
  const q = [nAll * s2[0] - 2n * d1[0] * tx,
             nAll * s2[1] - (d1[0] * ty + d1[1] * tx),
             nAll * s2[2] - 2n * d1[1] * ty];
  const den2 = Number(nAll * na * nb);
  const scale = [px * px, px * py, py * py];
  const dm2 = q.map((v, k) => Number(v) * scale[k] / den2);
  return { dc, dm2 };
}

function kernel(d) {
  const u = d / D.correlated.length_um;
  return D.correlated.kernel === "exponential" ? Math.exp(-u) : Math.exp(-(u * u));
}

function score(ids) {
  const [px, py] = D.pitch_um;
  const nDev = D.devices.length;
  const us = units(ids);
  const s = gridSums(us, nDev);
  const xy = us.map(([r, c]) => [c * px, -r * py]);
  let cx = 0, cy = 0;
  for (const p of xy) { cx += p[0]; cy += p[1]; }
  cx /= xy.length; cy /= xy.length;
  const n = new Array(nDev).fill(0), sx = new Array(nDev).fill(0), sy = new Array(nDev).fill(0);
  us.forEach(([, , d], i) => { n[d] += 1; sx[d] += xy[i][0]; sy[d] += xy[i][1]; });
  const cen = sx.map((v, d) => [v / n[d], sy[d] / n[d]]);
  // correlated field: covariance of device means, every pair of units
  const cov = Array.from({ length: nDev }, () => new Array(nDev).fill(0));
  if (D.correlated.sigma_ppm > 0) {
    for (let i = 0; i < us.length; i++) {
      const di = us[i][2];
      cov[di][di] += 1;                       // distance 0: correlation 1
      for (let j = i + 1; j < us.length; j++) {
        const k = kernel(Math.hypot(xy[i][0] - xy[j][0], xy[i][1] - xy[j][1]));
        const dj = us[j][2];
        cov[di][dj] += k; cov[dj][di] += k;
      }
    }
    for (let a = 0; a < nDev; a++) for (let b = 0; b < nDev; b++) cov[a][b] /= n[a] * n[b];
  }
  const g = D.linear_ppm_per_um, h = D.quadratic_ppm_per_um2;
  const pairs = D.pairs.map(([a, b]) => {
    const t = pairTerms(s, a, b, px, py);
    const dist = Math.hypot(t.dc[0], t.dc[1]);
    let angle = dist > 0 ? Math.atan2(t.dc[1], t.dc[0]) * 180 / Math.PI : 0;
    angle = ((angle % 360) + 360) % 360;
    const norm = Math.sqrt(t.dm2[0] * t.dm2[0] + 2 * (t.dm2[1] * t.dm2[1]) + t.dm2[2] * t.dm2[2]);
    const variance = Math.max(cov[a][a] + cov[b][b] - 2 * cov[a][b], 0);
    const area = (d) => n[d] * D.white.unit_area_um2;
    const white = 1e4 * D.white.a_param_pct_um * Math.sqrt((1 / area(a) + 1 / area(b)) / 2);
    return {
      a, b, dc: t.dc, linear: g * dist, angle, quadratic: 0.5 * h * norm,
      corr: D.correlated.sigma_ppm * Math.sqrt(variance), white,
    };
  });
  const worstOf = (key) => {
    let best = null;
    for (const p of pairs) if (best === null || Math.abs(p[key]) > Math.abs(best[key])) best = p;
    return best === null ? { value: 0, pair: null } : { value: best[key], pair: best };
  };
  const worst = {
    linear: worstOf("linear"), quadratic: worstOf("quadratic"),
    corr: worstOf("corr"), white: worstOf("white"),
  };
  // each centroid's offset from the centre of all device units, from the integer sums
  // (N S1_d - n_d T) / (n_d N): an exact zero stays zero, with no float noise
  const nAll = s.reduce((acc, t) => acc + t[0], 0n);
  const tu = s.reduce((acc, t) => acc + t[1], 0n), tv = s.reduce((acc, t) => acc + t[2], 0n);
  const devices = D.devices.map((name, d) => {
    const den = Number(s[d][0] * nAll);
    const du = den ? Number(nAll * s[d][1] - s[d][0] * tu) / den * px : 0;
    const dv = den ? Number(nAll * s[d][2] - s[d][0] * tv) / den * py : 0;
    return { name, units: n[d], centroid: cen[d], offset: Math.hypot(du, dv),
             edge: edgeUnits(ids, d) };
  });
  return { pairs, worst, devices, centre: [cx, cy], cen, xy, us, n };
}

function edgeUnits(ids, d) {
  const rows = ids.length, cols = ids[0].length;
  const filled = (r, c) => r >= 0 && r < rows && c >= 0 && c < cols && ids[r][c] !== EMPTY;
  let count = 0;
  for (let r = 0; r < rows; r++) for (let c = 0; c < cols; c++) {
    if (ids[r][c] !== d) continue;
    if (!(filled(r - 1, c) && filled(r + 1, c) && filled(r, c - 1) && filled(r, c + 1))) count++;
  }
  return count;
}

// worst pair ratio error under a linear gradient pointing at angle theta
function directionError(sc, theta) {
  let worst = 0;
  for (const p of sc.pairs) {
    worst = Math.max(worst, Math.abs(D.linear_ppm_per_um *
      (Math.cos(theta) * p.dc[0] + Math.sin(theta) * p.dc[1])));
  }
  return worst;
}

// ---------------------------------------------------------------- the budget
function erf(x) {
  // series below 2.5, continued fraction of erfc above: both to about 1e-15
  const ax = Math.abs(x);
  if (ax < 2.5) {
    let term = ax, sum = ax;
    for (let k = 1; k < 200; k++) {
      term *= -ax * ax / k;
      const add = term / (2 * k + 1);
      sum += add;
      if (Math.abs(add) < 1e-17 * Math.abs(sum)) break;
    }
    const v = 2 / Math.sqrt(Math.PI) * sum;
    return x < 0 ? -v : v;
  }
  // erfc(x) = exp(-x^2)/sqrt(pi) * 1/(x + 1/2/(x + 1/(x + 3/2/(x + ...)))) (Lentz)
  const tiny = 1e-300;
  let f = ax, C = ax, Dd = 0;
  for (let k = 1; k < 500; k++) {
    const a = k / 2;
    Dd = ax + a * Dd; if (Math.abs(Dd) < tiny) Dd = tiny; Dd = 1 / Dd;
    C = ax + a / C; if (Math.abs(C) < tiny) C = tiny;
    const delta = C * Dd;
    f *= delta;
    if (Math.abs(delta - 1) < 1e-16) break;
  }
  const erfc = Math.exp(-ax * ax) / Math.sqrt(Math.PI) / f;
  return x < 0 ? erfc - 1 : 1 - erfc;
}

function withinTolerance(offset, sigma, tol) {
  if (sigma <= 0) return Math.abs(offset) <= tol ? 1 : 0;
  const phi = (z) => 0.5 * (1 + erf(z / Math.SQRT2));
  return phi((tol - offset) / sigma) - phi((-tol - offset) / sigma);
}

function ratioBudget(sc) {
  const B = D.budget;
  const find = (a, b) => sc.pairs.find((p) => (p.a === a && p.b === b) || (p.a === b && p.b === a));
  return B.lines.map((ln) => {
    const p = find(ln.pair[0], ln.pair[1]);
    const grad = 1e-4 * p.linear, quad = 1e-4 * p.quadratic, corr = 1e-4 * p.corr;
    const sigma = Math.sqrt(ln.white_pct ** 2 + corr ** 2);
    const k = B.k_sigma;
    const clm = ln.clm_pct;
    return {
      device: ln.device, gradient: grad, quadratic: quad, clm, sigma,
      low: clm - grad - quad - k * sigma, high: clm + grad + quad + k * sigma,
      within: withinTolerance(Math.abs(clm) + grad + quad, sigma, B.tolerance_pct),
    };
  });
}

// INL and DNL (LSB) from each level's deviation from the ideal, as placer's budget
// computes them (dac_inl_dnl): d = (E W - I E_T) / (W (W + E_T)), the fitted line is the
// ideal one plus the line fitted to d (slope s), LSB = 1/W + s
function dacInlDnl(weights, termWeight, err, errTerm, fit) {
  const nb = weights.length, codes = 1 << nb;
  let total = termWeight;
  for (const w of weights) total += w;
  const we = weights.map((w, b) => err[b] * w);
  let eTotal = termWeight * errTerm;
  { let s = 0; for (const v of we) s += v; eTotal = s + eTotal; }
  const ideal = new Array(codes), dev = new Array(codes);
  for (let k = 0; k < codes; k++) {
    let i = 0, e = 0;
    for (let b = 0; b < nb; b++) if ((k >> b) & 1) { i += weights[b]; e += we[b]; }
    ideal[k] = i;
    dev[k] = (e * total - i * eTotal) / (total * (total + eTotal));
  }
  let slope;
  const resid = new Array(codes);
  if (fit === "endpoint") {
    slope = (dev[codes - 1] - dev[0]) / (ideal[codes - 1] - ideal[0]);
    for (let k = 0; k < codes; k++) resid[k] = dev[k] - dev[0] - (ideal[k] - ideal[0]) * slope;
  } else {
    let mi = 0, md = 0;
    for (let k = 0; k < codes; k++) { mi += ideal[k]; md += dev[k]; }
    mi /= codes; md /= codes;
    let sdi = 0, sii = 0;
    for (let k = 0; k < codes; k++) { sdi += (dev[k] - md) * (ideal[k] - mi); sii += (ideal[k] - mi) ** 2; }
    slope = sdi / sii;
    for (let k = 0; k < codes; k++) resid[k] = (dev[k] - md) - (ideal[k] - mi) * slope;
  }
  const lsb = 1 / total + slope;
  const inl = resid.map((r) => r / lsb);
  const dnl = [];
  for (let k = 0; k + 1 < codes; k++) dnl.push(((dev[k + 1] - dev[k]) - slope * (ideal[k + 1] - ideal[k])) / lsb);
  return [inl, dnl];
}

function dacBudget(sc) {
  const B = D.budget;
  const inlOf = (err) => dacInlDnl(B.weights, B.termination_weight, B.index.map((d) => err[d]),
    B.termination === null ? 0 : err[B.termination], B.fit);
  const maxAbs = (a) => a.reduce((m, v) => Math.max(m, Math.abs(v)), 0);
  const [cx, cy] = sc.centre;
  // centroids of the positions about the centre (as placer computes them)
  const nDev = D.devices.length;
  const cen = Array.from({ length: nDev }, () => [0, 0]);
  sc.us.forEach(([, , d], i) => { cen[d][0] += sc.xy[i][0] - cx; cen[d][1] += sc.xy[i][1] - cy; });
  cen.forEach((c, d) => { c[0] /= sc.n[d]; c[1] /= sc.n[d]; });
  const g = D.linear_ppm_per_um * 1e-6;
  let best = -1, bestInl = 0, bestDnl = 0, bestAngle = 0;
  for (let deg = 0; deg < 360; deg++) {
    const t = deg * (Math.PI / 180);
    const err = cen.map(([x, y]) => g * (Math.cos(t) * x + Math.sin(t) * y));
    const [inl, dnl] = inlOf(err);
    const w = maxAbs(inl);
    if (w > best) { best = w; bestInl = w; bestAngle = deg; }
    bestDnl = Math.max(bestDnl, maxAbs(dnl));       // the worst DNL over every direction
  }
  // the worst Hessian of the spec's norm (as placer's budget): one field per component
  // (a Mxx/2, b Mxy, c Myy/2 at the norm), then per code sqrt(Ia^2 + Ib^2/2 + Ic^2)
  const hq = D.quadratic_ppm_per_um2 * 1e-6;
  let qinl = 0, qdnl = 0;
  if (hq > 0) {
    const m = Array.from({ length: nDev }, () => [0, 0, 0]);
    sc.us.forEach(([, , d], i) => {
      const x = sc.xy[i][0] - cx, y = sc.xy[i][1] - cy;
      m[d][0] += x * x; m[d][1] += x * y; m[d][2] += y * y;
    });
    const parts = [0, 1, 2].map((j) => inlOf(m.map((v, d) =>
      hq * (j === 1 ? 1 : 0.5) * v[j] / sc.n[d])));
    const comb = (k, idx) => Math.sqrt(parts[0][k][idx] ** 2 + parts[1][k][idx] ** 2 / 2 +
                                       parts[2][k][idx] ** 2);
    for (let i = 0; i < parts[0][0].length; i++) qinl = Math.max(qinl, comb(0, i));
    for (let i = 0; i < parts[0][1].length; i++) qdnl = Math.max(qdnl, comb(1, i));
  }
  return { inl: bestInl, dnl: bestDnl, angle: bestAngle, qinl, qdnl };
}

// ---------------------------------------------------------------- drawing
function fmt(v) {
  // below a billionth of a ppm, um or LSB a figure is the arithmetic's rounding: show 0
  if (Math.abs(v) < 1e-9) return "0";
  const a = Math.abs(v);
  if (a >= 1e4 || a < 1e-3) return v.toExponential(2);
  return Number(v.toPrecision(3)).toString();
}

function el(tag, attrs = {}, text = null, ns = null) {
  const e = ns ? document.createElementNS(ns, tag) : document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, v);
  if (text !== null) e.textContent = text;
  return e;
}

const HATCH_SHAPES = {
  "..": "dots", "O.": "dots", "x.": "dots", "oo": "rings", "+o": "rings",
  "++": "plus", "xx": "cross", "**": "cross", "--": "hlines", "||": "vlines",
};

function patterns(svg) {
  const defs = el("defs", {}, null, SVGNS);
  const add = (id, draw) => {
    const p = el("pattern", { id, width: 8, height: 8, patternUnits: "userSpaceOnUse" }, null, SVGNS);
    draw(p);
    defs.appendChild(p);
  };
  const line = (p, x1, y1, x2, y2, colour) => p.appendChild(el("line",
    { x1, y1, x2, y2, stroke: colour, "stroke-width": 1 }, null, SVGNS));
  add("hatch-dummy", (p) => { line(p, 0, 8, 8, 0, "#888"); line(p, -2, 2, 2, -2, "#888"); line(p, 6, 10, 10, 6, "#888"); });
  add("hatch-dots", (p) => p.appendChild(el("circle", { cx: 4, cy: 4, r: 1.2, fill: "#222" }, null, SVGNS)));
  add("hatch-rings", (p) => p.appendChild(el("circle", { cx: 4, cy: 4, r: 2.2, fill: "none", stroke: "#222" }, null, SVGNS)));
  add("hatch-plus", (p) => { line(p, 4, 1, 4, 7, "#222"); line(p, 1, 4, 7, 4, "#222"); });
  add("hatch-cross", (p) => { line(p, 1, 1, 7, 7, "#222"); line(p, 1, 7, 7, 1, "#222"); });
  add("hatch-hlines", (p) => line(p, 0, 4, 8, 4, "#222"));
  add("hatch-vlines", (p) => line(p, 4, 0, 4, 8, "#222"));
  svg.appendChild(defs);
}

function drawArray(sc) {
  const ids = state.ids, rows = ids.length, cols = ids[0].length;
  const [px, py] = D.pitch_um;
  // true pitch, at most 560 x 520 px and 90 px a slot, but at least 14 px a slot (a
  // large array scrolls); drawn at that size (no zoom)
  const scale = Math.max(14 / Math.min(px, py),
    Math.min(560 / (cols * px), 520 / (rows * py), 90 / Math.min(px, py)));
  const w = px * scale, h = py * scale, m = 14;
  const W = cols * w + 2 * m, H = rows * h + 2 * m;
  const svg = el("svg", {
    viewBox: `0 0 ${W} ${H}`, width: W, height: H, role: "grid",
    "aria-label": `Array of ${rows} rows and ${cols} columns`,
  }, null, SVGNS);
  patterns(svg);
  const big = w >= 26 && h >= 18;
  for (let r = 0; r < rows; r++) {
    const rowG = el("g", { role: "row" }, null, SVGNS);
    for (let c = 0; c < cols; c++) {
      const d = ids[r][c], o = state.orient[r][c];
      const x = m + c * w, y = m + r * h;
      const what = d >= 0 ? D.devices[d] : d === DUMMY ? "dummy" : "empty";
      const mark = o > 0 ? ">" : o < 0 ? "<" : "";
      const g = el("g", {
        class: "slot", role: "gridcell", "data-row": r, "data-col": c,
        tabindex: r === state.focus[0] && c === state.focus[1] ? 0 : -1,
        "aria-label": `row ${r}, column ${c}: ${what}${mark ? ", finger " + (o > 0 ? "right" : "left") : ""}`,
      }, null, SVGNS);
      if (state.selected && state.selected[0] === r && state.selected[1] === c) {
        g.classList.add("selected");
        g.setAttribute("aria-selected", "true");
      }
      const fill = d >= 0 ? D.colours[d][0] : d === DUMMY ? D.dummy_colour : "none";
      g.appendChild(el("rect", { x: x + 1, y: y + 1, width: w - 2, height: h - 2, fill,
        stroke: d === EMPTY ? "#ddd" : "#222", "stroke-width": 0.8,
        "stroke-dasharray": d === EMPTY ? "3 2" : "none", class: "frame" }, null, SVGNS));
      const hatch = d === DUMMY ? "dummy" : d >= 0 ? HATCH_SHAPES[D.colours[d][1]] : null;
      if (hatch) {
        g.appendChild(el("rect", { x: x + 1, y: y + 1, width: w - 2, height: h - 2,
          fill: `url(#hatch-${hatch})`, "pointer-events": "none" }, null, SVGNS));
      }
      if (big && d >= 0) {
        g.appendChild(el("text", { x: x + w / 2, y: y + h * 0.42, "text-anchor": "middle",
          "font-size": Math.min(12, w / (0.62 * D.devices[d].length + 1)), "pointer-events": "none" },
        D.devices[d], SVGNS));
      }
      if (big && mark) {
        g.appendChild(el("text", { x: x + w / 2, y: y + h * 0.8, "text-anchor": "middle",
          "font-size": 11, "pointer-events": "none" }, mark, SVGNS));
      }
      g.addEventListener("click", () => pick(r, c));
      rowG.appendChild(g);
    }
    svg.appendChild(rowG);
  }
  // centroids and the centre of all device units
  const toX = (xu) => m + (xu / px + 0.5) * w, toY = (yu) => m + (-yu / py + 0.5) * h;
  const [ccx, ccy] = sc.centre;
  svg.appendChild(el("path", { d: `M${toX(ccx) - 9},${toY(ccy)}h18M${toX(ccx)},${toY(ccy) - 9}v18`,
    stroke: "#000", "stroke-width": 2.5, "pointer-events": "none" }, null, SVGNS));
  const rad = Math.max(3, Math.min(5.5, 0.3 * Math.min(w, h) + 2));
  sc.devices.forEach((dv, d) => {
    svg.appendChild(el("circle", { cx: toX(dv.centroid[0]), cy: toY(dv.centroid[1]), r: rad + 2,
      fill: "#fff", stroke: "none", "pointer-events": "none" }, null, SVGNS));
    svg.appendChild(el("circle", { cx: toX(dv.centroid[0]), cy: toY(dv.centroid[1]), r: rad,
      fill: D.colours[d][0], stroke: "#000", "stroke-width": 1.2, "pointer-events": "none" },
    null, SVGNS)).appendChild(el("title", {}, `${dv.name} centroid`, SVGNS));
  });
  const holder = document.getElementById("array");
  holder.replaceChildren(svg);
  svg.addEventListener("keydown", keys);
}

function pick(r, c) {
  state.focus = [r, c];
  if (state.selected === null) {
    state.selected = [r, c];
    render();
    say(`Selected row ${r}, column ${c}; pick the slot to swap it with.`);
    focusSlot();
    return;
  }
  const [r0, c0] = state.selected;
  state.selected = null;
  if (r0 === r && c0 === c) { render(); say("Selection cleared."); focusSlot(); return; }
  swap([r0, c0], [r, c]);
  focusSlot();
}

function focusSlot() {
  const [r, c] = state.focus;
  const s = document.querySelector(`.slot[data-row="${r}"][data-col="${c}"]`);
  if (s) s.focus();
}

function keys(ev) {
  const rows = state.ids.length, cols = state.ids[0].length;
  let [r, c] = state.focus;
  const moves = { ArrowUp: [-1, 0], ArrowDown: [1, 0], ArrowLeft: [0, -1], ArrowRight: [0, 1] };
  if (moves[ev.key]) {
    r = Math.min(rows - 1, Math.max(0, r + moves[ev.key][0]));
    c = Math.min(cols - 1, Math.max(0, c + moves[ev.key][1]));
    state.focus = [r, c];
    document.querySelectorAll(".slot").forEach((s) => s.setAttribute("tabindex", -1));
    focusSlot();
    const s = document.querySelector(`.slot[data-row="${r}"][data-col="${c}"]`);
    if (s) s.setAttribute("tabindex", 0);
    ev.preventDefault();
  } else if (ev.key === "Enter" || ev.key === " ") {
    pick(r, c);
    ev.preventDefault();
  } else if (ev.key === "Escape") {
    state.selected = null; render(); focusSlot();
  } else if (ev.key === "u" || ev.key === "z") {
    undo(); focusSlot();
  }
}

function figureRow(table, label, value, unit, key, extra = "") {
  const tr = el("tr");
  tr.appendChild(el("th", { scope: "row" }, label));
  const td = el("td", { "data-figure": key, "data-value": String(value) }, `${fmt(value)} ${unit}`);
  tr.appendChild(td);
  tr.appendChild(el("td", {}, extra));
  table.appendChild(tr);
}

function pairName(p) { return p ? `${D.devices[p.a]}/${D.devices[p.b]}` : ""; }

function drawFigures(sc) {
  const t = document.getElementById("worst");
  t.replaceChildren();
  const ref = state.reference;
  const was = (key) => ref ? ` (was ${fmt(ref.worst[key].value)} as loaded)` : "";
  figureRow(t, "linear error", sc.worst.linear.value, "ppm", "linear_ppm",
    pairName(sc.worst.linear.pair) + was("linear"));
  figureRow(t, "quadratic error", sc.worst.quadratic.value, "ppm", "quadratic_ppm",
    pairName(sc.worst.quadratic.pair) + was("quadratic"));
  figureRow(t, "correlated sigma", sc.worst.corr.value, "ppm", "correlated_sigma_ppm",
    pairName(sc.worst.corr.pair) + was("corr"));
  figureRow(t, "white sigma (area law)", sc.worst.white.value, "ppm", "white_sigma_ppm",
    pairName(sc.worst.white.pair));
  const note = el("caption", {}, `${D.gradient_described}; curvature ` +
    `${D.quadratic_ppm_per_um2} ppm/um2; correlated ${D.correlated.sigma_ppm} ppm over ` +
    `${D.correlated.length_um} um (${D.correlated.kernel})`);
  note.style.captionSide = "bottom"; note.style.fontSize = "0.8em"; note.style.textAlign = "left";
  t.appendChild(note);

  const dt = document.getElementById("devices");
  dt.replaceChildren();
  const head = el("tr");
  for (const hname of ["device", "units", "centroid x", "centroid y", "offset um", "edge units"]) head.appendChild(el("th", { scope: "col" }, hname));
  dt.appendChild(head);
  sc.devices.forEach((dv) => {
    const tr = el("tr");
    tr.appendChild(el("td", {}, dv.name));
    tr.appendChild(el("td", {}, String(dv.units)));
    tr.appendChild(el("td", { "data-figure": `centroid_x:${dv.name}`, "data-value": String(dv.centroid[0]) }, fmt(dv.centroid[0])));
    tr.appendChild(el("td", { "data-figure": `centroid_y:${dv.name}`, "data-value": String(dv.centroid[1]) }, fmt(dv.centroid[1])));
    tr.appendChild(el("td", { "data-figure": `offset_um:${dv.name}`, "data-value": String(dv.offset) }, fmt(dv.offset)));
    tr.appendChild(el("td", { "data-figure": `edge_units:${dv.name}`, "data-value": String(dv.edge) }, String(dv.edge)));
    dt.appendChild(tr);
  });
  drawPolar(sc);
  drawBudget(sc);
}

function drawPolar(sc) {
  const size = 300, c0 = size / 2, R = 120;
  const curves = [[sc, "#000", 2.4, "none", "on the board"]];
  if (state.reference) curves.unshift([state.reference, "#888", 1.5, "5 3", "as loaded"]);
  let top = 0;
  const pts = curves.map(([s]) => {
    const out = [];
    for (let deg = 0; deg <= 360; deg++) {
      const v = directionError(s, deg * Math.PI / 180);
      top = Math.max(top, v);
      out.push([deg, v]);
    }
    return out;
  });
  const svg = el("svg", { viewBox: `0 0 ${size} ${size + 30}`, role: "img",
    "aria-label": `Worst pair ratio error against gradient direction, up to ${fmt(top)} ppm` }, null, SVGNS);
  for (const f of [0.25, 0.5, 0.75, 1]) {
    svg.appendChild(el("circle", { cx: c0, cy: c0, r: R * f, fill: "none", stroke: "#ccc" }, null, SVGNS));
  }
  svg.appendChild(el("text", { x: c0 + 3, y: c0 - R - 3, "font-size": 10 }, top > 0 ? `${fmt(top)} ppm` : "0 ppm in every direction", SVGNS));
  pts.forEach((p, i) => {
    const [, colour, width, dash] = curves[i];
    const d = p.map(([deg, v], k) => {
      const rr = top > 0 ? R * v / top : 0, t = deg * Math.PI / 180;
      return `${k ? "L" : "M"}${(c0 + rr * Math.cos(t)).toFixed(2)},${(c0 - rr * Math.sin(t)).toFixed(2)}`;
    }).join("");
    svg.appendChild(el("path", { d, fill: "none", stroke: colour, "stroke-width": width, "stroke-dasharray": dash }, null, SVGNS));
  });
  svg.appendChild(el("text", { x: 4, y: size + 12, "font-size": 10 },
    "solid: the board now; dashed: as loaded", SVGNS));
  svg.appendChild(el("text", { x: 4, y: size + 25, "font-size": 10 },
    "direction of the gradient: 0 deg = +x, counter-clockwise", SVGNS));
  document.getElementById("polar").replaceChildren(svg);
}

function drawBudget(sc) {
  const holder = document.getElementById("budget");
  holder.replaceChildren();
  if (!D.budget) return;
  holder.appendChild(el("h2", {}, "Electrical budget"));
  const t = el("table");
  if (D.budget.kind === "ratio") {
    const head = el("tr");
    for (const hname of ["output", "gradient %", "curvature %", "clm %", "sigma %", "range %", "within tol."]) head.appendChild(el("th", { scope: "col" }, hname));
    t.appendChild(head);
    for (const ln of ratioBudget(sc)) {
      const tr = el("tr");
      tr.appendChild(el("td", {}, `${ln.device} / ${D.budget.reference}`));
      for (const [key, v] of [["gradient_pct", ln.gradient], ["quadratic_pct", ln.quadratic], ["clm_pct", ln.clm], ["random_sigma_pct", ln.sigma]]) {
        tr.appendChild(el("td", { "data-figure": `${key}:${ln.device}`, "data-value": String(v) }, fmt(v)));
      }
      tr.appendChild(el("td", { "data-figure": `range:${ln.device}`, "data-value": `${ln.low} ${ln.high}` }, `${fmt(ln.low)} .. ${fmt(ln.high)}`));
      const within = el("td", { "data-figure": `within_tolerance:${ln.device}`, "data-value": String(ln.within),
        class: ln.within >= 0.99 ? "good" : "bad" }, `${(100 * ln.within).toFixed(1)} %`);
      tr.appendChild(within);
      t.appendChild(tr);
    }
    holder.appendChild(t);
    holder.appendChild(el("p", { class: "hint" }, `+-${D.budget.k_sigma} sigma; tolerance +-${D.budget.tolerance_pct} %. Random part from the area law and the correlated field; the Monte Carlo of placer grade --budget-plot is not repeated here.`));
  } else {
    const b = dacBudget(sc);
    for (const [label, key, v] of [["gradient INL (worst direction)", "worst_gradient_inl_lsb", b.inl],
      ["gradient DNL", "worst_gradient_dnl_lsb", b.dnl], ["curvature INL", "quadratic_inl_lsb", b.qinl],
      ["curvature DNL", "quadratic_dnl_lsb", b.qdnl]]) {
      figureRow(t, label, v, "LSB", key, key === "worst_gradient_inl_lsb" ? `at ${b.angle} deg` : "");
    }
    holder.appendChild(t);
    holder.appendChild(el("p", { class: "hint" }, `${D.budget.fit} line; bits ${D.budget.bits.join(", ")}. The random INL (Monte Carlo) is in placer grade --budget-plot.`));
  }
}

function drawControls() {
  const bar = document.getElementById("controls");
  bar.replaceChildren();
  D.arrangements.forEach((a, k) => {
    const b = el("button", { type: "button", "data-load": k, "aria-pressed": String(k === state.loaded), title: a.note }, a.label);
    b.addEventListener("click", () => load(k));
    bar.appendChild(b);
  });
  const u = el("button", { type: "button", id: "undo", title: "Undo the last swap (key u)" }, "Undo");
  u.addEventListener("click", undo);
  bar.appendChild(u);
}

function drawLegend() {
  const lg = document.getElementById("legend");
  lg.replaceChildren();
  D.devices.forEach((name, d) => {
    const s = el("span");
    const sw = el("span", { class: "swatch" });
    sw.style.background = D.colours[d][0];
    s.appendChild(sw);
    s.appendChild(document.createTextNode(`${name} (${D.counts[d]} ${D.counts[d] === 1 ? "unit" : "units"})${D.colours[d][1] ? ", patterned" : ""}`));
    lg.appendChild(s);
  });
  const s = el("span");
  const sw = el("span", { class: "swatch" });
  sw.style.background = "repeating-linear-gradient(135deg, #fff 0 3px, #888 3px 4px)";
  s.appendChild(sw);
  s.appendChild(document.createTextNode("dummy; circles: centroids; cross: centre of all device units"));
  lg.appendChild(s);
}

// ---------------------------------------------------------------- export
function patternText() {
  const lines = [`# ${D.name}: exported from the lesson page`];
  state.ids.forEach((row, r) => {
    lines.push(row.map((d, c) => {
      if (d === DUMMY) return ".";
      if (d === EMPTY) return "-";
      const o = state.orient[r][c];
      return D.devices[d] + (o > 0 ? ">" : o < 0 ? "<" : "");
    }).join(" "));
  });
  return lines.join("\n") + "\n";
}

function exportPattern() {
  const text = patternText();
  document.getElementById("export-text").value = text;
  document.getElementById("download").href = "data:text/plain;charset=utf-8," + encodeURIComponent(text);
  say("Pattern text below; save it and run placer grade on it.");
}

// ---------------------------------------------------------------- guided steps
const STEPS = [
  ["1. A gradient and two centroids",
    ["A process gradient makes every unit a little stronger on one side of the die than on the other. " +
     "Under a linear gradient a device behaves like one unit at its centroid, the mean position of its units, " +
     "so two devices differ by the gradient times the distance between their centroids.",
     "Load <b>clustered</b>: the circles (centroids) sit apart and the linear error is large; the curve on the right " +
     "shows the error for every direction the gradient might take. Now swap units until the circles meet: " +
     "the linear error falls to zero in every direction at once."]],
  ["2. When centroids agree: curvature",
    ["With the centroids together, a curved field (temperature around a hot block, stress near an edge) still " +
     "separates devices whose units are spread differently: one sits more in the middle, the other further out. " +
     "That is the quadratic error, set by the difference of the devices' second moments.",
     "Compare <b>interdigitated</b> and <b>mirrored</b>: both may cancel the linear term, but the quadratic one differs. " +
     "Try swapping an inner unit of one device with an outer unit of another and watch it move."]],
  ["3. Dispersion and the random field",
    ["Part of the variation is random but correlated over short distances. Units of one device that huddle " +
     "together see the same local deviation; units spread among the others average it out.",
     "The correlated sigma drops as each device's units spread across the array: swap a tight cluster apart " +
     "and watch it. The white sigma comes from the area law and no arrangement changes it."]],
  ["4. Dummies and edges",
    ["A unit at the edge of an array sees different surroundings (etch, stress, implant shadowing) than its " +
     "neighbours inside. Dummy units (hatched) shield the edge so every real unit has the same surroundings.",
     "The devices table counts each device's units with an open side. Swap a unit with a dummy at the " +
     "edge (a ring around the array, or the ends of each row) and its count rises; keep every device's share " +
     "of edge units equal, or better zero. Then export the arrangement and grade it with placer."]],
];

function drawStep() {
  const [title, paras] = STEPS[state.step];
  document.getElementById("step-title").textContent = title;
  const box = document.getElementById("step-text");
  box.replaceChildren();
  for (const p of paras) { const e = el("p"); e.innerHTML = p; box.appendChild(e); }
  document.getElementById("step-count").textContent = `${state.step + 1} of ${STEPS.length}`;
  document.getElementById("step-back").disabled = state.step === 0;
  document.getElementById("step-next").disabled = state.step === STEPS.length - 1;
}

// every step's text for the printed handout (the page shows one step at a time)
function drawHandout() {
  const box = document.getElementById("handout-steps");
  box.replaceChildren();
  for (const [title, paras] of STEPS) {
    const part = el("section");
    const h = el("h3");
    h.textContent = title;
    part.appendChild(h);
    for (const p of paras) { const e = el("p"); e.innerHTML = p; part.appendChild(e); }
    box.appendChild(part);
  }
}

// ---------------------------------------------------------------- wiring up
function render() {
  const sc = score(state.ids);
  drawArray(sc);
  drawFigures(sc);
  drawControls();
  document.body.dataset.swaps = String(state.history.length);
}

document.getElementById("title").textContent =
  `${D.name}: ${D.devices.map((n, d) => `${n} = ${D.counts[d]}`).join(", ")}`;
document.getElementById("step-back").addEventListener("click", () => { state.step = Math.max(0, state.step - 1); drawStep(); });
document.getElementById("step-next").addEventListener("click", () => { state.step = Math.min(STEPS.length - 1, state.step + 1); drawStep(); });
document.getElementById("export").addEventListener("click", exportPattern);
document.getElementById("print").addEventListener("click", () => window.print());
drawLegend();
drawStep();
drawHandout();
load(0);
document.body.dataset.ready = "true";

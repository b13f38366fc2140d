// placer lesson page: swap units, turn the field, watch every figure follow (grade's
// formulas, updated from each swap's two slots).
// The formulas mirror placer/model/exact_moments.py (exact integer moments, here in BigInt),
// placer/model/variation.py (worst linear and quadratic errors, the correlated field, the area
// law) and placer/model/budget.py (ratio budget, capacitor-array INL and DNL).
"use strict";

const D = JSON.parse(document.getElementById("lesson-data").textContent);
const DUMMY = -1, EMPTY = -2;
const SVGNS = "http://www.w3.org/2000/svg";

// ---------------------------------------------------------------- state
// ids/orient: the board as the trainee sees it; model: its figures' parts, kept up to date
// swap by swap; refModel: the arrangement as loaded; field: the controls' field
const state = {
  ids: null, orient: null, history: [], selected: null, focus: [0, 0],
  loaded: 0, step: 0, model: null, refModel: null, reference: null, sc: null,
  field: null, shade: true, placing: false, board: null, route: null, refRoute: null,
  // an exercise: placer's arrangement revealed, hints shown, the best's figures
  revealed: false, hints: 0, best: null,
};

function copyGrid(g) { return g.map((row) => row.slice()); }

function load(k) {
  const a = D.arrangements[k];
  state.ids = copyGrid(a.ids);
  state.orient = copyGrid(a.orient);
  state.history = [];
  state.selected = null;
  state.loaded = k;
  state.model = boardModel(state.ids);
  state.refModel = copyModel(state.model);
  state.route = routingModel(state.ids, state.orient);
  state.refRoute = routingFigures(state.route);
  if (state.field === null) state.field = specField();
  state.reference = figures(state.refModel, state.field);
  drawControls();
  buildBoard();
  document.getElementById("field-col").max = state.ids[0].length - 1;
  document.getElementById("field-row").max = state.ids.length - 1;
  update(true);
  say(`Loaded ${a.label}: ${a.note}`);
}

// swap the contents of slots a and b ([row, column]); the figures follow from the change
function swap(a, b, record = true) {
  const [r1, c1] = a, [r2, c2] = b;
  const ids = state.ids;
  if (ids[r1][c1] === ids[r2][c2] && state.orient[r1][c1] === state.orient[r2][c2]) {
    say("Both slots hold the same thing: nothing to swap.");
    return;
  }
  // a unit onto a dummy or an empty slot moves the centre of all units, and an empty
  // slot has no shade: shade anew
  const [x1, x2] = [ids[r1][c1], ids[r2][c2]];
  const moved = (x1 >= 0) !== (x2 >= 0) || x1 === EMPTY || x2 === EMPTY;
  for (const g of [ids, state.orient]) {
    const t = g[r1][c1]; g[r1][c1] = g[r2][c2]; g[r2][c2] = t;
  }
  const cols = ids[0].length;
  swapSlots(state.model, r1 * cols + c1, r2 * cols + c2);
  routingSwap(state.route, r1 * cols + c1, r2 * cols + c2);
  if (record) state.history.push([a, b]);
  paintSlot(r1, c1);
  paintSlot(r2, c2);
  update(moved);
  if (record) {
    say(`Swapped row ${r1}, column ${c1} with row ${r2}, column ${c2}. ` +
        `Worst linear error now ${fmt(state.sc.worst.linear.value)} ppm.`);
  }
}

function undo() {
  if (!state.history.length) { say("Nothing to undo."); return; }
  select(null);
  const [a, b] = state.history.pop();
  swap(a, b, false);
  say("Undone.");
}

// a control of the field moved: every figure, the curve and the shading follow
function setField(changes) {
  Object.assign(state.field, changes);
  state.reference = figures(state.refModel, state.field);
  update(true);
}

function say(text) { document.getElementById("status").textContent = text; }

// ---------------------------------------------------------------- the model
// A board model holds the device of every slot and what the figures are made of: per
// device the exact integer sums of the slot grid (placer/model/exact_moments.py), the
// correlated field's sums over every ordered pair of units, and the edge units. A swap
// changes two slots, and setSlot brings those parts up to date from the change alone;
// boardModel builds them from scratch (tests/page_swaps.js holds the two together).
// figures() turns a model into every figure under a field (strength, direction,
// curvature and its centre), in time independent of the number of units.

function kernel(d) {
  const u = d / D.correlated.length_um;
  return D.correlated.kernel === "exponential" ? Math.exp(-u) : Math.exp(-(u * u));
}

// the spec's own field: its gradient (along its known direction, else +x), its
// curvature about the centre of all device units (spot null)
function specField() {
  const dir = D.direction_deg === undefined || D.direction_deg === null ? 0 : D.direction_deg;
  return { g: D.linear_ppm_per_um, theta: dir, h: D.quadratic_ppm_per_um2, spot: null };
}

function boardModel(ids) {
  const rows = ids.length, cols = ids[0].length, nDev = D.devices.length;
  const [px, py] = D.pitch_um;
  const dev = new Int32Array(rows * cols);
  ids.forEach((row, r) => row.forEach((d, c) => { dev[r * cols + c] = d; }));
  // the kernel of every grid offset (|row step|, |column step|): one look-up per unit pair
  const ktab = new Float64Array(rows * cols);
  for (let dr = 0; dr < rows; dr++) {
    for (let dc = 0; dc < cols; dc++) ktab[dr * cols + dc] = kernel(Math.hypot(dc * px, dr * py));
  }
  const m = {
    rows, cols, nDev, dev, ktab, corr: D.correlated.sigma_ppm > 0,
    n: new Array(nDev).fill(0),
    sums: Array.from({ length: nDev }, () => [0n, 0n, 0n, 0n, 0n, 0n]),
    // sum of the kernel over every ordered pair of units (i, j), i of device a and j of
    // device b, i = j included: the covariance of the device means times n_a n_b
    cov: new Float64Array(nDev * nDev),
    edge: new Array(nDev).fill(0),
  };
  const list = [];
  for (let s = 0; s < dev.length; s++) {
    if (dev[s] < 0) continue;
    list.push(s);
    m.n[dev[s]] += 1;
    addSums(m, s, dev[s], 1n);
  }
  if (m.corr) {
    for (let x = 0; x < list.length; x++) {
      const i = list[x], di = dev[i], ri = Math.floor(i / cols), ci = i - ri * cols;
      m.cov[di * nDev + di] += 1;                       // distance 0: correlation 1
      for (let y = x + 1; y < list.length; y++) {
        const j = list[y], rj = Math.floor(j / cols), cj = j - rj * cols;
        const k = ktab[Math.abs(ri - rj) * cols + Math.abs(ci - cj)], dj = dev[j];
        m.cov[di * nDev + dj] += k; m.cov[dj * nDev + di] += k;
      }
    }
  }
  for (const s of list) if (isEdge(m, s)) m.edge[dev[s]] += 1;
  return m;
}

// a model of its own (the look-up table of kernel values is shared: it never changes)
function copyModel(m) {
  return { ...m, dev: m.dev.slice(), n: m.n.slice(), sums: m.sums.map((t) => t.slice()),
           cov: m.cov.slice(), edge: m.edge.slice() };
}

// per device, as BigInt: n, sum u, sum v, sum uu, sum uv, sum vv with u = column, v = -row
function addSums(m, s, d, sign) {
  const r = Math.floor(s / m.cols);
  const u = BigInt(s - r * m.cols), v = BigInt(-r), t = m.sums[d];
  t[0] += sign; t[1] += sign * u; t[2] += sign * v;
  t[3] += sign * u * u; t[4] += sign * u * v; t[5] += sign * v * v;
}

// a unit with an open side: a neighbour off the grid or an empty slot (edge_units)
function isEdge(m, s) {
  const r = Math.floor(s / m.cols), c = s - r * m.cols, dev = m.dev;
  return r === 0 || r === m.rows - 1 || c === 0 || c === m.cols - 1 ||
    dev[s - m.cols] === EMPTY || dev[s + m.cols] === EMPTY ||
    dev[s - 1] === EMPTY || dev[s + 1] === EMPTY;
}

// slot s and its four neighbours: the units whose edge count a change at s can move
function around(m, s) {
  const r = Math.floor(s / m.cols), c = s - r * m.cols, out = [s];
  if (r > 0) out.push(s - m.cols);
  if (r < m.rows - 1) out.push(s + m.cols);
  if (c > 0) out.push(s - 1);
  if (c < m.cols - 1) out.push(s + 1);
  return out;
}

// put device d (or a dummy or an empty slot) at slot s: the sums lose the old unit's
// terms and gain the new one's; the correlated sums lose and gain slot s's row of kernel
// values by device (an exact rank update of the pair sums, O(units))
function setSlot(m, s, d) {
  const old = m.dev[s];
  if (old === d) return;
  const near = around(m, s);
  for (const t of near) if (m.dev[t] >= 0 && isEdge(m, t)) m.edge[m.dev[t]] -= 1;
  if (m.corr && (old >= 0 || d >= 0)) {
    const nd = m.nDev, cols = m.cols, row = new Float64Array(nd);
    const rs = Math.floor(s / cols), cs = s - rs * cols;
    for (let t = 0, r = 0, c = 0; t < m.dev.length; t++, c++) {
      if (c === cols) { c = 0; r++; }
      const dt = m.dev[t];
      if (dt < 0 || t === s) continue;
      row[dt] += m.ktab[Math.abs(r - rs) * cols + Math.abs(c - cs)];
    }
    for (const [a, sign] of [[old, -1], [d, 1]]) {
      if (a < 0) continue;
      for (let b = 0; b < nd; b++) {
        m.cov[a * nd + b] += sign * row[b];
        m.cov[b * nd + a] += sign * row[b];
      }
      m.cov[a * nd + a] += sign;                        // the unit with itself
    }
  }
  if (old >= 0) { m.n[old] -= 1; addSums(m, s, old, -1n); }
  m.dev[s] = d;
  if (d >= 0) { m.n[d] += 1; addSums(m, s, d, 1n); }
  for (const t of near) if (m.dev[t] >= 0 && isEdge(m, t)) m.edge[m.dev[t]] += 1;
}

function swapSlots(m, i, j) {
  const a = m.dev[i], b = m.dev[j];
  setSlot(m, i, b);
  setSlot(m, j, a);
}

function pairTerms(s, tot, a, b, px, py) {
  const na = s[a][0], nb = s[b][0];
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

// every figure of a model under field f: {g ppm/um, theta deg, h ppm/um2, spot [x, y] um
// or null for the centre of all device units}
function figures(m, f = specField()) {
  const [px, py] = D.pitch_um;
  const nDev = m.nDev, s = m.sums;
  const tot = [0n, 0n, 0n, 0n, 0n, 0n];
  for (const t of s) for (let k = 0; k < 6; k++) tot[k] += t[k];
  const [nAll, tu, tv] = tot;
  const N = Number(nAll);
  const centre = [Number(tu) / N * px, Number(tv) / N * py];
  const spot = f.spot === null ? centre : f.spot;
  const dir = [Math.cos(f.theta * Math.PI / 180), Math.sin(f.theta * Math.PI / 180)];
  const hb = f.h / (2 * Math.SQRT2);          // the bowl h/(2 sqrt 2) |r - spot|^2, norm h
  const sc = [spot[0] - centre[0], spot[1] - centre[1]];
  // per device, from the integer sums: the centroid, its offset from the centre
  // (N S1 - n T) / (n N) (an exact zero stays zero), the second moments about the centre
  // (N^2 S2 - 2 N S1 T + n T^2) / (n N^2)
  const devices = D.devices.map((name, d) => {
    const t = s[d], nd = t[0], n = Number(nd);
    const den = Number(nd * nAll), den2 = Number(nd * nAll * nAll);
    const rel = den ? [Number(nAll * t[1] - nd * tu) / den * px,
      Number(nAll * t[2] - nd * tv) / den * py] : [0, 0];
    const m2 = den ? [
      Number(nAll * nAll * t[3] - 2n * nAll * t[1] * tu + nd * tu * tu) / den2 * px * px,
      Number(nAll * nAll * t[4] - nAll * (t[1] * tv + t[2] * tu) + nd * tu * tv) / den2 * px * py,
      Number(nAll * nAll * t[5] - 2n * nAll * t[2] * tv + nd * tv * tv) / den2 * py * py] : [0, 0, 0];
    return { name, units: n, centroid: [Number(t[1]) / n * px, Number(t[2]) / n * py],
             rel, m2, offset: Math.hypot(rel[0], rel[1]), edge: m.edge[d] };
  });
  // each device's mean of the field less the mean over all device units:
  // g dir.(c_d - c) + hb (tr_d - tr_all - 2 (spot - c).(c_d - c))
  let trAll = 0;
  devices.forEach((dv) => { trAll += dv.units * (dv.m2[0] + dv.m2[2]); });
  trAll /= N;
  for (const dv of devices) {
    dv.field = f.g * (dir[0] * dv.rel[0] + dir[1] * dv.rel[1]) +
      hb * (dv.m2[0] + dv.m2[2] - trAll - 2 * (sc[0] * dv.rel[0] + sc[1] * dv.rel[1]));
  }
  const cov = (a, b) => m.cov[a * nDev + b] / (m.n[a] * m.n[b]);
  const pairs = D.pairs.map(([a, b]) => {
    const t = pairTerms(s, tot, a, b, px, py);
    const dist = Math.hypot(t.dc[0], t.dc[1]);
    let angle = dist > 0 ? Math.atan2(t.dc[1], t.dc[0]) * 180 / Math.PI : 0;
    angle = ((angle % 360) + 360) % 360;
    const norm = Math.sqrt(t.dm2[0] * t.dm2[0] + 2 * (t.dm2[1] * t.dm2[1]) + t.dm2[2] * t.dm2[2]);
    const variance = m.corr ? Math.max(cov(a, a) + cov(b, b) - 2 * cov(a, b), 0) : 0;
    const area = (d) => m.n[d] * D.white.unit_area_um2;
    const white = 1e4 * D.white.a_param_pct_um * Math.sqrt((1 / area(a) + 1 / area(b)) / 2);
    const along = f.g * (dir[0] * t.dc[0] + dir[1] * t.dc[1]);
    const bowl = hb * (t.dm2[0] + t.dm2[2] - 2 * (sc[0] * t.dc[0] + sc[1] * t.dc[1]));
    return {
      a, b, dc: t.dc, linear: f.g * dist, angle, quadratic: 0.5 * f.h * norm,
      along, bowl, field: along + bowl,
      corr: D.correlated.sigma_ppm * Math.sqrt(variance), white,
    };
  });
  // the worst pair of a figure: the largest size, shown as a size
  const worstOf = (key) => {
    let best = null;
    for (const p of pairs) if (best === null || Math.abs(p[key]) > Math.abs(best[key])) best = p;
    return best === null ? { value: 0, pair: null } : { value: Math.abs(best[key]), pair: best };
  };
  const worst = {};
  for (const key of ["linear", "along", "quadratic", "bowl", "field", "corr", "white"]) {
    worst[key] = worstOf(key);
  }
  return { pairs, worst, devices, centre, spot, field: f };
}

// every figure of an arrangement, from scratch
function score(ids, f = specField()) { return figures(boardModel(ids), f); }

// worst pair ratio error under the gradient g pointing at angle theta
function directionError(sc, theta) {
  let worst = 0;
  const c = Math.cos(theta), s = Math.sin(theta);
  for (const p of sc.pairs) worst = Math.max(worst, Math.abs(sc.field.g * (c * p.dc[0] + s * p.dc[1])));
  return worst;
}

// ---------------------------------------------------------------- the routing cost
// placer/model/routing_estimate.py's estimate of an arrangement's wiring: one track per
// device net in each row (row_tracks), each device's Euclidean minimum spanning tree over
// its units (spanning_tree_length) and, for MOS fingers, the diffusion breaks between
// neighbouring fingers (diffusion_breaks; fingers two to an island: diffusion_joins with
// "pairs", every finger alone when one finds no partner). A swap changes two slots: only
// their rows and their two devices are counted again.
const NO_NET = -1e9;

function routingModel(ids, orient) {
  const rows = ids.length, cols = ids[0].length, nDev = D.devices.length;
  const rm = { rows, cols, nDev, dev: new Int32Array(rows * cols), ori: new Int8Array(rows * cols),
    tracks: new Int32Array(rows), tree: new Float64Array(nDev),
    // per row: breaks between neighbouring fingers (joined as drawn), fingers without
    // a partner, neighbouring finger pairs
    breaks: new Int32Array(rows), unpaired: new Int32Array(rows), adjacent: new Int32Array(rows) };
  ids.forEach((row, r) => row.forEach((d, c) => {
    rm.dev[r * cols + c] = d; rm.ori[r * cols + c] = orient[r][c];
  }));
  for (let r = 0; r < rows; r++) routingRow(rm, r);
  for (let d = 0; d < nDev; d++) rm.tree[d] = treeLength(rm, d);
  return rm;
}

function copyRouting(rm) {
  return { ...rm, dev: rm.dev.slice(), ori: rm.ori.slice(), tracks: rm.tracks.slice(),
           tree: rm.tree.slice(), breaks: rm.breaks.slice(), unpaired: rm.unpaired.slice(),
           adjacent: rm.adjacent.slice() };
}

// Prim's algorithm on every pairwise distance (as _prim, Cormen et al. sec. 23.2)
function treeLength(rm, d) {
  const [px, py] = D.pitch_um, xs = [], ys = [];
  for (let s = 0; s < rm.dev.length; s++) {
    if (rm.dev[s] !== d) continue;
    const r = Math.floor(s / rm.cols);
    xs.push((s - r * rm.cols) * px); ys.push(-r * py);
  }
  const n = xs.length;
  if (n < 2) return 0;
  const best = new Float64Array(n), done = new Uint8Array(n);
  // squared distances while choosing (sqrt is monotone), lengths summed at the end
  for (let i = 0; i < n; i++) best[i] = (xs[i] - xs[0]) ** 2 + (ys[i] - ys[0]) ** 2;
  done[0] = 1;
  let total = 0;
  for (let step = 1; step < n; step++) {
    let k = -1, low = Infinity;
    for (let i = 0; i < n; i++) if (!done[i] && best[i] < low) { low = best[i]; k = i; }
    total += Math.sqrt(low); done[k] = 1;
    const x = xs[k], y = ys[k];
    for (let i = 0; i < n; i++) {
      if (done[i]) continue;
      const dx = xs[i] - x, dy = ys[i] - y, v = dx * dx + dy * dy;
      if (v < best[i]) best[i] = v;
    }
  }
  return total;
}

// (left, right) diffusion net of a slot (facing): a finger's by its orientation, a
// dummy's the dummy net, an empty slot's two nets equal to nothing
function facingNets(rm, s) {
  const d = rm.dev[s], R = D.routing;
  if (d >= 0) {
    const [src, drn] = R.nets === null ? [-1, d] : R.nets[d];
    return rm.ori[s] >= 0 ? [src, drn] : [drn, src];
  }
  if (d === DUMMY) return [R.dummy_net, R.dummy_net];
  return [NO_NET, NO_NET - 1];
}

function routingRow(rm, r) {
  const cols = rm.cols, base = r * cols, seen = new Uint8Array(rm.nDev);
  let tracks = 0;
  for (let c = 0; c < cols; c++) {
    const d = rm.dev[base + c];
    if (d >= 0 && !seen[d]) { seen[d] = 1; tracks++; }
  }
  rm.tracks[r] = tracks;
  if (!D.routing.fingers) return;
  const nets = [];
  for (let c = 0; c < cols; c++) nets.push(facingNets(rm, base + c));
  const active = (c) => rm.dev[base + c] >= 0;
  let adjacent = 0, breaks = 0, unpaired = 0;
  if (!D.routing.pairs) {
    for (let c = 1; c < cols; c++) {
      if (active(c - 1) && active(c) && nets[c - 1][1] !== nets[c][0]) breaks++;
    }
    rm.breaks[r] = breaks;
    return;
  }
  // the joins that pair the most active fingers, then the most active pairs (_row_pairs)
  const bestCov = new Array(cols + 1).fill(0), bestPairs = new Array(cols + 1).fill(0);
  const took = new Uint8Array(cols + 1);
  for (let c = 2; c <= cols; c++) {
    bestCov[c] = bestCov[c - 1]; bestPairs[c] = bestPairs[c - 1];
    const a = active(c - 2), b = active(c - 1);
    if (nets[c - 2][1] === nets[c - 1][0] && (a || b)) {
      const cov = bestCov[c - 2] + a + b, pairs = bestPairs[c - 2] + (a && b ? 1 : 0);
      if (cov > bestCov[c] || (cov === bestCov[c] && pairs > bestPairs[c])) {
        bestCov[c] = cov; bestPairs[c] = pairs; took[c] = 1;
      }
    }
  }
  const joined = new Uint8Array(Math.max(cols - 1, 0)), paired = new Uint8Array(cols);
  for (let c = cols; c >= 2;) {
    if (took[c]) { joined[c - 2] = 1; paired[c - 2] = 1; paired[c - 1] = 1; c -= 2; } else c -= 1;
  }
  for (let c = 0; c < cols; c++) if (active(c) && !paired[c]) unpaired++;
  for (let c = 1; c < cols; c++) {
    if (active(c - 1) && active(c)) { adjacent++; if (!joined[c - 1]) breaks++; }
  }
  rm.breaks[r] = breaks; rm.unpaired[r] = unpaired; rm.adjacent[r] = adjacent;
}

// slots i and j exchange their contents (unit and orientation)
function routingSwap(rm, i, j) {
  const a = rm.dev[i], b = rm.dev[j];
  rm.dev[i] = b; rm.dev[j] = a;
  const o = rm.ori[i]; rm.ori[i] = rm.ori[j]; rm.ori[j] = o;
  const ri = Math.floor(i / rm.cols), rj = Math.floor(j / rm.cols);
  routingRow(rm, ri);
  if (rj !== ri) routingRow(rm, rj);
  if (a !== b) {
    if (a >= 0) rm.tree[a] = treeLength(rm, a);
    if (b >= 0) rm.tree[b] = treeLength(rm, b);
  }
}

// the routing figures of a routing model: estimate_routing's, and the fingers that find
// no partner when fingers go two to an island
function routingFigures(rm) {
  let total = 0, tracks = 0, wide = 0, unpaired = 0, joinedBreaks = 0, adjacent = 0;
  for (let d = 0; d < rm.nDev; d++) total += rm.tree[d];
  for (let r = 0; r < rm.rows; r++) {
    tracks += rm.tracks[r]; wide = Math.max(wide, rm.tracks[r]);
    unpaired += rm.unpaired[r]; joinedBreaks += rm.breaks[r]; adjacent += rm.adjacent[r];
  }
  const R = D.routing;
  let breaks = null;
  if (R.fingers) breaks = !R.pairs || unpaired === 0 ? joinedBreaks : adjacent;
  return { tracks, rowTracks: Array.from(rm.tracks), widest: wide, tree: Array.from(rm.tree),
           total, breaks, unpaired: R.fingers && R.pairs ? unpaired : null };
}

// ---------------------------------------------------------------- the exercise's score
// An exercise (placer/io/exercise.py) bounds some figures of the board, at the spec's own
// field, and allows a number of swaps. goalValues reads those figures; exerciseScore says
// how the board stands: every goal met within the swaps allowed ("met"), met with too
// many swaps ("over"), not yet ("open"), or placer's arrangement revealed ("revealed").
// A figure within a billionth of its bound (the arithmetic's rounding) meets it.
function goalValues(goals, sc, rt) {
  const of = {
    linear_ppm: sc.worst.linear.value, quadratic_ppm: sc.worst.quadratic.value,
    correlated_sigma_ppm: sc.worst.corr.value, total_tree_um: rt.total, row_tracks: rt.tracks,
    diffusion_breaks: rt.breaks, unpaired_fingers: rt.unpaired,
  };
  return goals.map((g) => of[g.figure]);
}

function exerciseScore(E, values, swaps, revealed) {
  const met = E.goals.map((g, k) => values[k] <= g.at_most + 1e-9 * Math.max(1, g.at_most));
  const nMet = met.filter(Boolean).length, all = nMet === met.length;
  let verdict, text;
  if (revealed) {
    verdict = "revealed";
    text = "Revealed: placer's arrangement, its figures against the goals. Start again to try once more.";
  } else if (all && swaps <= E.max_swaps) {
    verdict = "met";
    text = `Goal met in ${swaps} ${swaps === 1 ? "swap" : "swaps"} (${E.max_swaps} allowed).`;
  } else if (all) {
    verdict = "over";
    text = `Every goal met, but in ${swaps} swaps; ${E.max_swaps} are allowed: Undo or Start again.`;
  } else {
    verdict = "open";
    text = `${nMet} of ${met.length} ${met.length === 1 ? "goal" : "goals"} met; ` +
      `${swaps} of ${E.max_swaps} swaps used.`;
  }
  return { verdict, met, text, nMet };
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
// ideal one plus the line fitted to d (slope s), LSB = 1/W + s.
// dacLine keeps each code's numerator n = E W - I E_T and fits the line to n itself:
// n, its line's slope S and residuals R and the steps' departures are all linear in the
// device errors, and only the common denominator W (W + E_T) is not; then
// INL_k = R_k / (W + E_T + S) and DNL_k likewise.
function dacLine(err) {
  const B = D.budget, weights = B.weights, fit = B.fit;
  const nb = weights.length, codes = 1 << nb;
  let total = B.termination_weight;
  for (const w of weights) total += w;
  const we = B.index.map((d, b) => err[d] * weights[b]);
  let eTotal = B.termination_weight * (B.termination === null ? 0 : err[B.termination]);
  { let s = 0; for (const v of we) s += v; eTotal = s + eTotal; }
  // each code's sums from the code without its highest bit: the bits are added in
  // ascending order, as a loop over the bits would add them
  const ideal = new Float64Array(codes), esum = new Float64Array(codes), num = new Float64Array(codes);
  for (let k = 1; k < codes; k++) {
    const top = 31 - Math.clz32(k), rest = k ^ (1 << top);
    ideal[k] = ideal[rest] + weights[top];
    esum[k] = esum[rest] + we[top];
  }
  for (let k = 0; k < codes; k++) num[k] = esum[k] * total - ideal[k] * eTotal;
  let slope;
  const resid = new Float64Array(codes);
  if (fit === "endpoint") {
    slope = (num[codes - 1] - num[0]) / (ideal[codes - 1] - ideal[0]);
    for (let k = 0; k < codes; k++) resid[k] = num[k] - num[0] - (ideal[k] - ideal[0]) * slope;
  } else {
    let mi = 0, md = 0;
    for (let k = 0; k < codes; k++) { mi += ideal[k]; md += num[k]; }
    mi /= codes; md /= codes;
    let sdi = 0, sii = 0;
    for (let k = 0; k < codes; k++) { sdi += (num[k] - md) * (ideal[k] - mi); sii += (ideal[k] - mi) ** 2; }
    slope = sdi / sii;
    for (let k = 0; k < codes; k++) resid[k] = (num[k] - md) - (ideal[k] - mi) * slope;
  }
  const step = new Float64Array(codes - 1);
  for (let k = 0; k + 1 < codes; k++) step[k] = (num[k + 1] - num[k]) - slope * (ideal[k + 1] - ideal[k]);
  return { total, eTotal, slope, resid, step };
}

function dacInlDnl(err) {
  const L = dacLine(err), q = L.total + L.eTotal + L.slope;
  return [L.resid.map((r) => r / q), L.step.map((v) => v / q)];
}

function dacBudget(sc) {
  // centroids and second moments about the centre of all device units (as placer's)
  const g = sc.field.g * 1e-6;
  // a gradient at angle t: err = cos t X + sin t Y, so each direction's INL and DNL are
  // the same combination of the two lines' residuals over its own denominator
  const X = dacLine(sc.devices.map((dv) => g * dv.rel[0]));
  const Y = dacLine(sc.devices.map((dv) => g * dv.rel[1]));
  let best = -1, bestInl = 0, bestDnl = 0, bestAngle = 0;
  for (let deg = 0; deg < 360; deg++) {
    const t = deg * (Math.PI / 180), c = Math.cos(t), s = Math.sin(t);
    const q = Math.abs(X.total + (c * X.eTotal + s * Y.eTotal) + (c * X.slope + s * Y.slope));
    let wi = 0, wd = 0;
    for (let k = 0; k < X.resid.length; k++) wi = Math.max(wi, Math.abs(c * X.resid[k] + s * Y.resid[k]));
    for (let k = 0; k < X.step.length; k++) wd = Math.max(wd, Math.abs(c * X.step[k] + s * Y.step[k]));
    const w = wi / q;
    if (w > best) { best = w; bestInl = w; bestAngle = deg; }
    bestDnl = Math.max(bestDnl, wd / q);              // the worst DNL over every direction
  }
  // the worst Hessian of the norm (as placer's budget): one field per component
  // (a Mxx/2, b Mxy, c Myy/2 at the norm), then per code sqrt(Ia^2 + Ib^2/2 + Ic^2)
  const hq = sc.field.h * 1e-6;
  let qinl = 0, qdnl = 0;
  if (hq > 0) {
    const parts = [0, 1, 2].map((j) => dacInlDnl(sc.devices.map((dv) =>
      hq * (j === 1 ? 1 : 0.5) * dv.m2[j])));
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

// the field's value (ppm) at a point: the gradient along its direction plus the bowl
// about the hot spot, h/(2 sqrt 2) |r - spot|^2 (a Hessian of norm h, as bowl_ppm)
function fieldAt(f, spot, x, y) {
  const t = f.theta * Math.PI / 180;
  return f.g * (Math.cos(t) * x + Math.sin(t) * y) +
    f.h / (2 * Math.SQRT2) * ((x - spot[0]) ** 2 + (y - spot[1]) ** 2);
}

// blue below the units' mean field, white at it, red above (strongest: the darkest)
function shadeColour(t) {
  const lo = [49, 99, 179], mid = [250, 250, 250], hi = [196, 48, 43];
  const end = t < 0 ? lo : hi, a = Math.min(1, Math.abs(t));
  const c = mid.map((v, k) => Math.round(v + (end[k] - v) * a));
  return `rgb(${c[0]},${c[1]},${c[2]})`;
}

function buildBoard() {
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
  const b = { svg, w, h, m, rows, cols, big: w >= 26 && h >= 18, slots: [],
    shade: new Array(rows * cols).fill("none"),
    // the shade shows as a frame round each unit, a fifth of the slot on each side
    inset: [Math.max(2, 0.2 * w), Math.max(2, 0.2 * h)] };
  state.board = b;
  for (let r = 0; r < rows; r++) {
    const rowG = el("g", { role: "row" }, null, SVGNS);
    for (let c = 0; c < cols; c++) {
      const g = el("g", { class: "slot", role: "gridcell", "data-row": r, "data-col": c,
        tabindex: r === state.focus[0] && c === state.focus[1] ? 0 : -1 }, null, SVGNS);
      g.addEventListener("click", () => pick(r, c));
      b.slots.push(g);
      rowG.appendChild(g);
    }
    svg.appendChild(rowG);
  }
  // the centre of all device units, each device's centroid, the hot spot
  const marks = el("g", { "pointer-events": "none" }, null, SVGNS);
  b.cross = marks.appendChild(el("path", { stroke: "#000", "stroke-width": 2.5 }, null, SVGNS));
  b.rad = Math.max(3, Math.min(5.5, 0.3 * Math.min(w, h) + 2));
  b.spot = marks.appendChild(el("g", {}, null, SVGNS));
  b.spot.appendChild(el("circle", { r: b.rad + 3, fill: "none", stroke: "#fff", "stroke-width": 4 }, null, SVGNS));
  b.spot.appendChild(el("circle", { r: b.rad + 3, fill: "none", stroke: "#000", "stroke-width": 1.6,
    "stroke-dasharray": "3 2" }, null, SVGNS));
  b.spot.appendChild(el("title", {}, "hot spot: the centre of the curvature", SVGNS));
  b.dots = D.devices.map((name, d) => {
    const dot = marks.appendChild(el("g", {}, null, SVGNS));
    dot.appendChild(el("circle", { r: b.rad + 2, fill: "#fff", stroke: "none" }, null, SVGNS));
    dot.appendChild(el("circle", { r: b.rad, fill: D.colours[d][0], stroke: "#000", "stroke-width": 1.2 }, null, SVGNS));
    dot.appendChild(el("title", {}, `${name} centroid`, SVGNS));
    return dot;
  });
  svg.appendChild(marks);
  for (let r = 0; r < rows; r++) for (let c = 0; c < cols; c++) paintSlot(r, c);
  document.getElementById("array").replaceChildren(svg);
  svg.addEventListener("keydown", keys);
}

// one slot drawn as it now stands: the field's shade round the unit, the unit's colour
// and hatch inside, its name and finger mark on a large board
function paintSlot(r, c) {
  const b = state.board, s = r * b.cols + c, g = b.slots[s];
  const d = state.ids[r][c], o = state.orient[r][c];
  const x = b.m + c * b.w, y = b.m + r * b.h, w = b.w, h = b.h;
  const what = d >= 0 ? D.devices[d] : d === DUMMY ? "dummy" : "empty";
  const mark = o > 0 ? ">" : o < 0 ? "<" : "";
  g.setAttribute("aria-label", `row ${r}, column ${c}: ${what}${mark ? ", finger " + (o > 0 ? "right" : "left") : ""}`);
  const fill = d >= 0 ? D.colours[d][0] : d === DUMMY ? D.dummy_colour : "none";
  const parts = [];
  parts.push(el("rect", { x: x + 1, y: y + 1, width: w - 2, height: h - 2,
    fill: d === EMPTY ? "none" : state.shade ? b.shade[s] : fill,
    stroke: d === EMPTY ? "#ddd" : state.shade ? "#777" : "#222", "stroke-width": state.shade ? 0.5 : 0.8,
    // an empty slot (no fill) takes clicks over its whole area too
    "stroke-dasharray": d === EMPTY ? "3 2" : "none", class: "frame", "pointer-events": "all" }, null, SVGNS));
  const [kx, ky] = state.shade && d !== EMPTY ? b.inset : [1, 1];
  const inner = { x: x + kx, y: y + ky, width: Math.max(1, w - 2 * kx), height: Math.max(1, h - 2 * ky) };
  if (d !== EMPTY) {
    parts.push(el("rect", { ...inner, fill, stroke: state.shade && b.big ? "#444" : "none", "stroke-width": 0.5,
      "pointer-events": "none" }, null, SVGNS));
  }
  const hatch = d === DUMMY ? "dummy" : d >= 0 ? HATCH_SHAPES[D.colours[d][1]] : null;
  if (hatch) {
    parts.push(el("rect", { ...inner, fill: `url(#hatch-${hatch})`, "pointer-events": "none" }, null, SVGNS));
  }
  if (b.big && d >= 0) {
    parts.push(el("text", { x: x + w / 2, y: y + h * 0.42, "text-anchor": "middle",
      "font-size": Math.min(12, w / (0.62 * D.devices[d].length + 1)), "pointer-events": "none" },
    D.devices[d], SVGNS));
  }
  if (b.big && mark) {
    parts.push(el("text", { x: x + w / 2, y: y + h * 0.8, "text-anchor": "middle",
      "font-size": 11, "pointer-events": "none" }, mark, SVGNS));
  }
  g.replaceChildren(...parts);
}

// the field's shade of every slot, relative to the mean over the device units (each
// slot's group carries the value as data-field, ppm)
function shadeField(sc) {
  const b = state.board, f = state.field, ids = state.ids;
  const [px, py] = D.pitch_um;
  const vals = new Float64Array(b.rows * b.cols);
  let mean = 0, n = 0;
  for (let r = 0; r < b.rows; r++) {
    for (let c = 0; c < b.cols; c++) {
      const v = fieldAt(f, sc.spot, c * px, -r * py);
      vals[r * b.cols + c] = v;
      if (ids[r][c] >= 0) { mean += v; n++; }
    }
  }
  mean /= n;
  let top = 0;
  for (let s = 0; s < vals.length; s++) {
    vals[s] -= mean;
    if (ids[Math.floor(s / b.cols)][s % b.cols] !== EMPTY) top = Math.max(top, Math.abs(vals[s]));
  }
  let lo = 0, hi = 0;
  for (let s = 0; s < vals.length; s++) {
    const r = Math.floor(s / b.cols), c = s - r * b.cols;
    if (ids[r][c] === EMPTY) { b.slots[s].removeAttribute("data-field"); continue; }
    lo = Math.min(lo, vals[s]); hi = Math.max(hi, vals[s]);
    b.shade[s] = shadeColour(top > 0 ? vals[s] / top : 0);
    b.slots[s].setAttribute("data-field", String(vals[s]));
    const frame = b.slots[s].firstChild;
    if (frame && state.shade) frame.setAttribute("fill", b.shade[s]);
  }
  document.getElementById("field-scale").replaceChildren(
    el("span", { class: "scale-bar" }),
    document.createTextNode(top > 0 ? ` ${fmt(lo)} .. +${fmt(hi)} ppm about the units' mean`
      : " no field"));
}

function drawMarkers(sc) {
  const b = state.board, [px, py] = D.pitch_um;
  const toX = (xu) => b.m + (xu / px + 0.5) * b.w, toY = (yu) => b.m + (-yu / py + 0.5) * b.h;
  const [cx, cy] = [toX(sc.centre[0]), toY(sc.centre[1])];
  b.cross.setAttribute("d", `M${cx - 9},${cy}h18M${cx},${cy - 9}v18`);
  sc.devices.forEach((dv, d) => {
    b.dots[d].setAttribute("transform", `translate(${toX(dv.centroid[0])},${toY(dv.centroid[1])})`);
  });
  b.spot.setAttribute("transform", `translate(${toX(sc.spot[0])},${toY(sc.spot[1])})`);
  b.spot.style.display = state.field.h > 0 ? "" : "none";
}

function select(rc) {
  const b = state.board;
  if (state.selected) {
    const g = b.slots[state.selected[0] * b.cols + state.selected[1]];
    g.classList.remove("selected");
    g.removeAttribute("aria-selected");
  }
  state.selected = rc;
  if (rc) {
    const g = b.slots[rc[0] * b.cols + rc[1]];
    g.classList.add("selected");
    g.setAttribute("aria-selected", "true");
  }
}

function pick(r, c) {
  setFocus(r, c);
  if (state.placing) {                      // the hot spot goes to this slot's centre
    const [px, py] = D.pitch_um;
    state.placing = false;
    document.getElementById("field-place").setAttribute("aria-pressed", "false");
    setField({ spot: [c * px, -r * py] });
    say(`Hot spot at row ${r}, column ${c}.`);
    focusSlot();
    return;
  }
  if (state.selected === null) {
    select([r, c]);
    say(`Selected row ${r}, column ${c}; pick the slot to swap it with.`);
    focusSlot();
    return;
  }
  const [r0, c0] = state.selected;
  select(null);
  if (r0 === r && c0 === c) { say("Selection cleared."); focusSlot(); return; }
  swap([r0, c0], [r, c]);
  focusSlot();
}

function setFocus(r, c) {
  const b = state.board, [r0, c0] = state.focus;
  b.slots[r0 * b.cols + c0].setAttribute("tabindex", -1);
  b.slots[r * b.cols + c].setAttribute("tabindex", 0);
  state.focus = [r, c];
}

function focusSlot() {
  const b = state.board, [r, c] = state.focus;
  b.slots[r * b.cols + c].focus();
}

function keys(ev) {
  const rows = state.ids.length, cols = state.ids[0].length;
  let [r, c] = state.focus;
  const moves = { ArrowUp: [-1, 0], ArrowDown: [1, 0], ArrowLeft: [0, -1], ArrowRight: [0, 1] };
  if (moves[ev.key]) {
    r = Math.min(rows - 1, Math.max(0, r + moves[ev.key][0]));
    c = Math.min(cols - 1, Math.max(0, c + moves[ev.key][1]));
    setFocus(r, c);
    focusSlot();
    ev.preventDefault();
  } else if (ev.key === "Enter" || ev.key === " ") {
    pick(r, c);
    ev.preventDefault();
  } else if (ev.key === "Escape") {
    select(null); focusSlot();
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
  const ref = state.reference, f = state.field;
  const was = (key) => ref ? ` (was ${fmt(ref.worst[key].value)} as loaded)` : "";
  const row = (label, key, fig) => figureRow(t, label, sc.worst[key].value, "ppm", fig,
    pairName(sc.worst[key].pair) + was(key));
  row("linear error, worst direction", "linear", "linear_ppm");
  row(`linear error at ${fmt(f.theta)} deg`, "along", "along_ppm");
  row("quadratic error, worst curvature", "quadratic", "quadratic_ppm");
  row("bowl about the hot spot", "bowl", "bowl_ppm");
  row("the shaded field (both)", "field", "field_ppm");
  row("correlated sigma", "corr", "correlated_sigma_ppm");
  figureRow(t, "white sigma (area law)", sc.worst.white.value, "ppm", "white_sigma_ppm",
    pairName(sc.worst.white.pair));
  const spec = specField();
  const note = el("caption", {}, `gradient ${fmt(f.g)} ppm/um at ${fmt(f.theta)} deg ` +
    `(the spec: ${D.gradient_described}); curvature ${fmt(f.h)} ppm/um2 (the spec: ` +
    `${fmt(spec.h)}) about ${spotName(sc)}; correlated ${D.correlated.sigma_ppm} ppm over ` +
    `${D.correlated.length_um} um (${D.correlated.kernel})`);
  note.style.captionSide = "bottom"; note.style.fontSize = "0.8em"; note.style.textAlign = "left";
  t.appendChild(note);

  const dt = document.getElementById("devices");
  dt.replaceChildren();
  const head = el("tr");
  for (const hname of ["device", "units", "centroid x", "centroid y", "offset um", "field ppm", "edge units", "wire um"]) head.appendChild(el("th", { scope: "col" }, hname));
  dt.appendChild(head);
  sc.devices.forEach((dv, d) => {
    const tr = el("tr");
    const cell = (key, v, text = fmt(v)) => tr.appendChild(el("td", { "data-figure": `${key}:${dv.name}`, "data-value": String(v) }, text));
    tr.appendChild(el("td", {}, dv.name));
    tr.appendChild(el("td", {}, String(dv.units)));
    cell("centroid_x", dv.centroid[0]);
    cell("centroid_y", dv.centroid[1]);
    cell("offset_um", dv.offset);
    cell("field_mean", dv.field);
    cell("edge_units", dv.edge, String(dv.edge));
    cell("tree_um", state.route.tree[d]);
    dt.appendChild(tr);
  });
  drawPolar(sc);
  drawBudget(sc);
}

// the routing cost beside the error figures: tracks, wire, and for MOS the diffusion
function drawRouting(rt) {
  const t = document.getElementById("routing");
  t.replaceChildren();
  const ref = state.refRoute;
  const was = (v) => ref ? ` (was ${fmt(v)} as loaded)` : "";
  const rows = rt.rowTracks.length <= 12 ? `per row ${rt.rowTracks.join(" ")}`
    : `widest row ${rt.widest}`;
  figureRow(t, "row tracks, all rows", rt.tracks, "", "row_tracks", rows + was(ref.tracks));
  figureRow(t, "spanning-tree wire, all devices", rt.total, "um", "total_tree_um", was(ref.total));
  if (rt.breaks !== null) {
    figureRow(t, "diffusion breaks", rt.breaks, "", "diffusion_breaks", was(ref.breaks));
  }
  if (rt.unpaired !== null) {
    figureRow(t, "fingers without a partner", rt.unpaired, "", "unpaired_fingers",
      was(ref.unpaired));
  }
}

function spotName(sc) {
  const [px, py] = D.pitch_um;
  const where = `row ${fmt(-sc.spot[1] / py)}, column ${fmt(sc.spot[0] / px)}`;
  return state.field.spot === null ? `the centre of the units (${where})` : where;
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
  // the direction the controls set, and the board's error along it
  const t = state.field.theta * Math.PI / 180, v = sc.worst.along.value;
  const rr = top > 0 ? R * v / top : 0;
  svg.appendChild(el("line", { x1: c0, y1: c0, x2: c0 + R * Math.cos(t), y2: c0 - R * Math.sin(t),
    stroke: "#C4302B", "stroke-width": 1.5, "stroke-dasharray": "2 2" }, null, SVGNS));
  svg.appendChild(el("circle", { cx: c0 + rr * Math.cos(t), cy: c0 - rr * Math.sin(t), r: 4,
    fill: "#C4302B" }, null, SVGNS)).appendChild(el("title", {}, `${fmt(v)} ppm at ${fmt(state.field.theta)} deg`, SVGNS));
  svg.appendChild(el("text", { x: 4, y: size + 12, "font-size": 10 },
    "solid: now; dashed: as loaded; red: the set direction", SVGNS));
  svg.appendChild(el("text", { x: 4, y: size + 25, "font-size": 10 },
    "direction of the gradient: 0 deg = +x, counter-clockwise", SVGNS));
  document.getElementById("polar").replaceChildren(svg);
}

// ---------------------------------------------------------------- the field's controls
// sliders for the gradient's direction and strength, the curvature and its centre (in
// slot coordinates); a button that puts the centre on the next slot clicked
function fieldControls() {
  const spec = specField();
  const top = (v, dflt) => 4 * (v > 0 ? v : dflt);
  const ranges = {
    "field-angle": [0, 359, 1], "field-g": [0, top(spec.g, 10), top(spec.g, 10) / 400],
    "field-h": [0, top(spec.h, 0.05), top(spec.h, 0.05) / 400],
    "field-col": [0, 1, 0.5], "field-row": [0, 1, 0.5],       // the board's size: load()
  };
  for (const [id, [lo, hi, step]] of Object.entries(ranges)) {
    const input = document.getElementById(id);
    input.min = lo; input.max = hi; input.step = step;
    input.addEventListener("input", () => fieldInput(id, Number(input.value)));
  }
  document.getElementById("field-shade").addEventListener("change", (ev) => {
    state.shade = ev.target.checked;
    const b = state.board;
    for (let r = 0; r < b.rows; r++) for (let c = 0; c < b.cols; c++) paintSlot(r, c);
  });
  document.getElementById("field-reset").addEventListener("click", () => {
    setField(specField());
    say("The field as the spec gives it.");
  });
  document.getElementById("field-centre").addEventListener("click", () => setField({ spot: null }));
  document.getElementById("field-place").addEventListener("click", (ev) => {
    state.placing = !state.placing;
    ev.target.setAttribute("aria-pressed", String(state.placing));
    say(state.placing ? "Click the slot where the hot spot should sit." : "");
  });
}

function fieldInput(id, v) {
  const [px, py] = D.pitch_um, sc = state.sc;
  if (id === "field-angle") setField({ theta: v });
  else if (id === "field-g") setField({ g: v });
  else if (id === "field-h") setField({ h: v });
  else if (id === "field-col") setField({ spot: [v * px, sc.spot[1]] });
  else setField({ spot: [sc.spot[0], -v * py] });
}

// the sliders and their read-outs as the field stands
function showField() {
  const f = state.field, sc = state.sc, [px, py] = D.pitch_um;
  const put = (id, v, text) => {
    const input = document.getElementById(id);
    if (document.activeElement !== input) input.value = v;
    document.getElementById(`${id}-out`).textContent = text;
  };
  put("field-angle", ((f.theta % 360) + 360) % 360, `${fmt(f.theta)} deg`);
  put("field-g", f.g, `${fmt(f.g)} ppm/um`);
  put("field-h", f.h, `${fmt(f.h)} ppm/um2`);
  put("field-col", sc.spot[0] / px, fmt(sc.spot[0] / px));
  put("field-row", -sc.spot[1] / py, fmt(-sc.spot[1] / py));
  document.getElementById("compass-arrow").setAttribute("transform",
    `rotate(${-f.theta} 14 14)`);
  document.getElementById("compass").setAttribute("aria-label", `gradient rising towards ${fmt(f.theta)} deg`);
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
  if (!D.exercise) D.arrangements.forEach((a, k) => {
    const b = el("button", { type: "button", "data-load": k, "aria-pressed": String(k === state.loaded), title: a.note }, a.label);
    // placer's own arrangement is for the spec's counts only: not on a board made here
    if (a.ids === null) b.disabled = true;
    else b.addEventListener("click", () => load(k));
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

// ---------------------------------------------------------------- the exercise
function startExercise() {
  const E = D.exercise;
  document.getElementById("exercise").hidden = false;
  document.getElementById("ex-title").textContent = `Exercise: ${E.title}`;
  document.getElementById("ex-task").textContent = E.task;
  const b = D.arrangements[E.best];
  state.best = goalValues(E.goals, score(b.ids), routingFigures(routingModel(b.ids, b.orient)));
  document.getElementById("ex-restart").addEventListener("click", () => {
    state.revealed = false;
    load(E.start);
    say("The exercise's start again: swaps count from here.");
  });
  document.getElementById("ex-reveal").addEventListener("click", () => {
    state.revealed = true;
    load(E.best);
    say(`Revealed placer's arrangement: ${D.arrangements[E.best].note}.`);
  });
  const hint = document.getElementById("ex-hint");
  hint.disabled = E.hints.length === 0;
  hint.addEventListener("click", showHint);
  // the handout states the task and its goals (the hints stay on the page)
  const box = document.getElementById("handout-exercise");
  box.appendChild(el("h3", {}, `Exercise: ${E.title}`));
  box.appendChild(el("p", {}, E.task));
  const list = el("ul");
  for (const g of E.goals) list.appendChild(el("li", {}, `${g.label} \u2264 ${fmt(g.at_most)}${g.unit ? " " + g.unit : ""}`));
  list.appendChild(el("li", {}, `within ${E.max_swaps} ${E.max_swaps === 1 ? "swap" : "swaps"} from the ${D.arrangements[E.start].label} arrangement`));
  box.appendChild(list);
}

function showHint() {
  const E = D.exercise;
  if (state.hints >= E.hints.length) return;
  const li = el("li", { "data-hint": state.hints }, E.hints[state.hints]);
  document.getElementById("ex-hints").appendChild(li);
  state.hints += 1;
  const b = document.getElementById("ex-hint");
  b.textContent = state.hints < E.hints.length ? `Another hint (${state.hints} of ${E.hints.length} shown)` : "Every hint shown";
  b.disabled = state.hints >= E.hints.length;
}

// the goals against the board, at the spec's own field whatever the controls show
function drawExercise(rt) {
  const E = D.exercise;
  const now = goalValues(E.goals, figures(state.model, specField()), rt);
  const s = exerciseScore(E, now, state.history.length, state.revealed);
  const t = document.getElementById("ex-goals");
  t.replaceChildren();
  const head = el("tr");
  for (const h of ["goal", "now", "placer's best", ""]) head.appendChild(el("th", { scope: "col" }, h));
  t.appendChild(head);
  E.goals.forEach((g, k) => {
    const tr = el("tr");
    const u = g.unit ? ` ${g.unit}` : "";
    tr.appendChild(el("td", {}, `${g.label} \u2264 ${fmt(g.at_most)}${u}`));
    tr.appendChild(el("td", { "data-goal": g.figure, "data-value": String(now[k]) }, `${fmt(now[k])}${u}`));
    tr.appendChild(el("td", {}, `${fmt(state.best[k])}${u}`));
    tr.appendChild(el("td", { class: s.met[k] ? "good" : "bad" },
      s.met[k] ? "met" : `${fmt(now[k] - g.at_most)}${u} over`));
    t.appendChild(tr);
  });
  const p = document.getElementById("ex-score");
  p.textContent = s.text;
  p.className = s.verdict === "met" ? "met" : "";
  p.dataset.score = s.verdict;
  p.dataset.swaps = String(state.history.length);
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

// ---------------------------------------------------------------- a new board
// The trainee sets each device's unit count and the core's rows and columns; the page
// builds the textbook arrangements for them itself, as placer/search/baselines.py deals
// them on a core without constraints (clustered, interdigitated, mirrored) and as
// placer/model/grid.py puts the dummies round it, then every figure follows the new
// board. placer's own search ran for the spec's counts only: its button waits for a
// placer lesson run on a spec with the new ones.

// deal(): at each position the device furthest behind its share, ties to the lowest index
function dealSequence(counts) {
  let total = 0;
  for (const c of counts) total += c;
  const given = counts.map(() => 0), out = [];
  for (let i = 0; i < total; i++) {
    let d = -1, top = -Infinity;
    counts.forEach((want, k) => {
      const lag = given[k] < want ? (i + 1) * want / total - given[k] : -1e9;
      if (lag > top) { top = lag; d = k; }
    });
    given[d] += 1;
    out.push(d);
  }
  return out;
}

// the three arrangements' cores (reading order; -1 a spare slot) for counts on n slots
function textbookCores(counts, n) {
  const fill = (seq) => { const a = new Array(n).fill(DUMMY); seq.forEach((d, i) => { a[i] = d; }); return a; };
  const clustered = [];
  counts.forEach((c, d) => { for (let k = 0; k < c; k++) clustered.push(d); });
  const left = counts.slice(), inter = [];
  while (left.some((c) => c > 0)) {
    for (let d = 0; d < left.length; d++) if (left[d]) { inter.push(d); left[d] -= 1; }
  }
  // half of each device dealt over the first half, reflected through the centre; the
  // odd units left over on the free slots nearest the middle
  const mirror = new Array(n).fill(DUMMY);
  dealSequence(counts.map((c) => Math.floor(c / 2))).forEach((d, i) => {
    mirror[i] = d; mirror[n - 1 - i] = d;
  });
  const rest = [];
  counts.forEach((c, d) => { if (c % 2) rest.push(d); });
  const order = Array.from({ length: n }, (_, k) => k);
  order.sort((a, b) => Math.abs(a - (n - 1) / 2) - Math.abs(b - (n - 1) / 2) || a - b);
  const free = order.filter((k) => mirror[k] < 0);
  rest.forEach((d, i) => { mirror[free[i]] = d; });
  return { clustered: fill(clustered), interdigitated: fill(inter), mirrored: mirror };
}

// a core in reading order -> the whole board: dummies by a style around it (ring: the
// border all round, corners too; ends: a column at each end of every row; none), as
// grid.full_pattern_ids puts them round a core without a mask; spare slots dummies
const DUMMY_PAD = { none: [0, 0], ends: [0, 1], ring: [1, 1] };

function fullBoard(core, rows, cols, style) {
  const [pr, pc] = DUMMY_PAD[style];
  const ids = [];
  for (let r = 0; r < rows + 2 * pr; r++) {
    const row = [];
    for (let c = 0; c < cols + 2 * pc; c++) {
      const rr = r - pr, cc = c - pc;
      row.push(rr >= 0 && rr < rows && cc >= 0 && cc < cols ? core[rr * cols + cc] : DUMMY);
    }
    ids.push(row);
  }
  return ids;
}

// ---- MOS fingers: each board's orientations as placer's build_pattern marks them
// (placer/model/routing_estimate.py orient_row and pair_row, row by row with one running
// tally of each device's '>' less '<', then placer/jobs/arrange.py balance_orientations);
// ties are broken in the same order as there.
function fingerEnds(d, mark) {
  const [src, drn] = D.routing.nets === null ? [-1, d] : D.routing.nets[d];
  return mark >= 0 ? [src, drn] : [drn, src];
}

// orient_row: the fewest diffusion breaks between neighbouring fingers
function orientRow(ids, balance) {
  const n = ids.length, cost = ids.map(() => [0, 0]), back = ids.map(() => [-1, -1]);
  for (let i = 1; i < n; i++) {
    const d = ids[i], [c0, c1] = cost[i - 1], arg = c0 <= c1 ? 0 : 1;
    if (d < 0 || ids[i - 1] < 0) {
      const best = arg === 0 ? c0 : c1;
      cost[i] = [best, best]; back[i] = [arg, arg];
      continue;
    }
    const r0 = fingerEnds(ids[i - 1], -1)[1], r1 = fingerEnds(ids[i - 1], 1)[1];
    for (const o of [0, 1]) {
      const left = fingerEnds(d, o ? 1 : -1)[0];
      const opt0 = c0 + (r0 !== left ? 1 : 0), opt1 = c1 + (r1 !== left ? 1 : 0);
      const p = opt0 <= opt1 ? 0 : 1;
      cost[i][o] = p === 0 ? opt0 : opt1; back[i][o] = p;
    }
  }
  const marks = new Array(n).fill(0), last = cost[n - 1];
  let o = last[0] <= last[1] ? 0 : 1;
  if (last[0] === last[1] && ids[n - 1] >= 0) o = (balance.get(ids[n - 1]) || 0) <= 0 ? 1 : 0;
  for (let i = n - 1; i >= 0; i--) {
    if (ids[i] >= 0) {
      marks[i] = o ? 1 : -1;
      balance.set(ids[i], (balance.get(ids[i]) || 0) + marks[i]);
    }
    o = back[i][o] >= 0 ? back[i][o] : 0;
  }
  return marks;
}

// (covered, pairs) compared as Python compares tuples
const tupleMore = (a, b) => a[0] > b[0] || (a[0] === b[0] && a[1] > b[1]);
const tupleSame = (a, b) => a[0] === b[0] && a[1] === b[1];
function tupleMax(values) {
  let top = null;
  for (const v of values) if (top === null || tupleMore(v, top)) top = v;
  return top;
}
const edgeWeight = (a, b) => { const n = (a >= 0 ? 1 : 0) + (b >= 0 ? 1 : 0); return [n, n === 2 ? 1 : 0]; };

// pair_row: the most fingers sharing diffusion with exactly one neighbour
function pairRow(ids, balance) {
  const n = ids.length, dummy = D.routing.dummy_net;
  const sides = (i, o) => {
    const d = ids[i];
    if (d >= 0) return fingerEnds(d, o ? 1 : -1);
    return d === DUMMY ? [dummy, dummy] : [NO_NET, NO_NET - 1];
  };
  // val[i]: Map "o,m" -> [covered, pairs] (insertion order as the Python dict's)
  const val = [], back = [];
  for (let i = 0; i < n; i++) {
    const v = new Map(), b = new Map();
    for (const o of ids[i] >= 0 ? [0, 1] : [1]) {
      if (i === 0) { v.set(`${o},0`, [0, 0]); b.set(`${o},0`, null); continue; }
      const prev = val[i - 1];
      let key = null;
      for (const [k, pv] of prev) if (key === null || tupleMore(pv, prev.get(key))) key = k;
      v.set(`${o},0`, prev.get(key)); b.set(`${o},0`, key);
      const left = sides(i, o)[0], w = edgeWeight(ids[i - 1], ids[i]);
      if (w[0] === 0) continue;
      for (const [k, pv] of prev) {
        const [po, pm] = k.split(",").map(Number);
        if (pm === 0 && sides(i - 1, po)[1] === left) {
          const cand = [pv[0] + w[0], pv[1] + w[1]];
          if (!v.has(`${o},1`) || tupleMore(cand, v.get(`${o},1`))) { v.set(`${o},1`, cand); b.set(`${o},1`, k); }
        }
      }
    }
    val.push(v); back.push(b);
  }
  const pick = (cands, i) => {
    const d = ids[i];
    if (d < 0 || cands.length === 1) return cands[0];
    const want = (balance.get(d) || 0) <= 0 ? 1 : 0;
    return cands.find((k) => Number(k.split(",")[0]) === want) || cands[0];
  };
  const best = (m) => { const top = tupleMax(m.values()); return [...m].filter(([, s]) => tupleSame(s, top)).map(([k]) => k); };
  let state = pick(best(val[n - 1]), n - 1);
  const marks = new Array(n).fill(0);
  for (let i = n - 1; i >= 0; i--) {
    const [o, m] = state.split(",").map(Number);
    if (ids[i] >= 0) {
      marks[i] = o ? 1 : -1;
      balance.set(ids[i], (balance.get(ids[i]) || 0) + marks[i]);
    }
    let prev = back[i].get(state);
    if (prev === null) break;
    if (i >= 1 && m === 0) prev = pick(best(val[i - 1]), i - 1);
    state = prev;
  }
  return marks;
}

// active fingers of a row left without a partner (unpaired_in_row)
function unpairedInRow(row, mk) {
  const rm = { dev: row, ori: mk, nDev: D.devices.length, cols: row.length, rows: 1,
    tracks: new Int32Array(1), breaks: new Int32Array(1), unpaired: new Int32Array(1),
    adjacent: new Int32Array(1) };
  routingRow(rm, 0);
  return rm.unpaired[0];
}

// balance_orientations: flip single fingers or neighbouring pairs while that evens out
// each device's '>' and '<' and adds no break (with pairs: leaves no more unpaired)
function balanceOrientations(ids, orient) {
  const pairs = D.routing.pairs, nCols = ids[0].length;
  const tally = new Array(D.devices.length).fill(0);
  ids.forEach((row, r) => row.forEach((d, c) => { if (d >= 0) tally[d] += orient[r][c]; }));
  const edgeBreaks = (row, mk, lo, hi) => {
    if (pairs) return unpairedInRow(row, mk);
    let out = 0;
    for (let c = Math.max(lo, 1); c <= Math.min(hi, nCols - 1); c++) {
      const a = row[c - 1], b = row[c];
      if (a >= 0 && b >= 0 && fingerEnds(a, mk[c - 1])[1] !== fingerEnds(b, mk[c])[0]) out++;
    }
    return out;
  };
  let improved = true;
  while (improved) {
    improved = false;
    ids.forEach((row, r) => {
      const mk = orient[r];
      for (let c = 0; c < nCols; c++) {
        for (const width of [1, 2]) {
          if (c + width > nCols || row.slice(c, c + width).some((d) => d < 0)) continue;
          const change = new Map();
          for (let x = c; x < c + width; x++) change.set(row[x], (change.get(row[x]) || 0) - 2 * mk[x]);
          let after = 0, now = 0;
          for (const [d, dt] of change) { after += Math.abs(tally[d] + dt); now += Math.abs(tally[d]); }
          if (after >= now) continue;
          const before = edgeBreaks(row, mk, c, c + width);
          for (let x = c; x < c + width; x++) mk[x] = -mk[x];
          if (edgeBreaks(row, mk, c, c + width) <= before) {
            for (const [d, dt] of change) tally[d] += dt;
            improved = true;
          } else {
            for (let x = c; x < c + width; x++) mk[x] = -mk[x];
          }
        }
      }
    });
  }
  return orient;
}

// the orientations of a whole board: zero without fingers
function boardOrientations(ids) {
  const orient = ids.map((row) => row.map(() => 0));
  if (!D.routing.fingers) return orient;
  const balance = new Map();
  ids.forEach((row, r) => { orient[r] = D.routing.pairs ? pairRow(row, balance) : orientRow(row, balance); });
  return ids.some((row) => row.some((d) => d >= 0)) ? balanceOrientations(ids, orient) : orient;
}

// what is wrong with a request for a new board, or null
function boardProblem(counts, rows, cols) {
  const E = D.editor, whole = (v) => Number.isInteger(v);
  for (let d = 0; d < counts.length; d++) {
    if (!whole(counts[d]) || counts[d] < 1) {
      return `${D.devices[d]} needs a whole number of units, at least 1 (got ${Number.isNaN(counts[d]) ? "nothing" : counts[d]}).`;
    }
  }
  if (!whole(rows) || !whole(cols) || rows < 1 || cols < 1) {
    return "Rows and columns must be whole numbers, at least 1.";
  }
  let units = 0;
  for (const c of counts) units += c;
  if (rows * cols > E.max_units) {
    return `${rows} x ${cols} = ${rows * cols} slots: the page handles a core of at most ` +
      `${E.max_units} slots.`;
  }
  if (units > rows * cols) {
    return `${units} units do not fit ${rows} x ${cols} = ${rows * cols} slots.`;
  }
  return null;
}

// the budget's parts for new counts (as present/lesson.py's _budget_data makes them)
function budgetFor(counts) {
  const B = D.editor.budget;
  if (!B || !D.budget) return D.budget;
  if (B.kind === "dac") {
    const index = B.switched.slice().sort((a, b) => counts[a] - counts[b] || a - b);
    const term = D.budget.termination;
    return { ...D.budget, bits: index.map((d) => D.devices[d]), index,
      weights: index.map((d) => counts[d]), termination_weight: term === null ? 0 : counts[term] };
  }
  const area = (d) => counts[d] * D.white.unit_area_um2, ref = B.reference;
  const old = new Map(D.budget.lines.map((ln) => [ln.device, ln]));
  // the area law, sigma = A sqrt((1/area_a + 1/area_b) / 2); a current's from beta and
  // VT (current_sigma), any other ratio's from the spec's matching coefficient
  const law = (a, d) => a * Math.sqrt((1 / area(d) + 1 / area(ref)) / 2);
  const white = (d) => B.current
    ? Math.sqrt(law(B.current.a_beta_pct_um, d) ** 2 +
                (B.current.gm_id_per_v * 0.1 * law(B.current.a_vt_mv_um, d)) ** 2)
    : law(D.white.a_param_pct_um, d);
  const lines = B.devices.filter((d) => d !== ref).map((d) => ({
    ...old.get(D.devices[d]), device: D.devices[d], pair: [d, ref], white_pct: white(d),
  }));
  return { ...D.budget, lines };
}

function makeBoard(counts, rows, cols, style) {
  const problem = boardProblem(counts, rows, cols);
  const msg = document.getElementById("edit-message");
  if (problem) {
    msg.textContent = problem; msg.className = "bad";
    return false;
  }
  const cores = textbookCores(counts, rows * cols);
  const shape = `${rows} x ${cols} core, dummies ${style}, built in the page`;
  const notes = { clustered: "each device's units side by side",
    interdigitated: "devices alternating along the rows",
    mirrored: "each row mirrored about the array's centre" };
  D.counts = counts.slice();
  D.budget = budgetFor(counts);
  D.arrangements = ["clustered", "interdigitated", "mirrored"].map((m) => {
    const ids = fullBoard(cores[m], rows, cols, style);
    return { label: m, note: `${notes[m]} (${shape})`, ids, orient: boardOrientations(ids) };
  });
  D.arrangements.push({ label: "optimised", note: "placer's search ran for the spec's own " +
    "counts: run placer lesson on a spec with these counts and this shape for it", ids: null });
  state.field = null;
  state.focus = [0, 0];
  drawTitle();
  drawLegend();
  load(0);
  msg.textContent = `A new board: ${counts.map((c, d) => `${D.devices[d]} = ${c}`).join(", ")} ` +
    `on ${rows} x ${cols} slots, dummies ${style}.`;
  msg.className = "good";
  return true;
}

function editorControls() {
  const E = D.editor, box = document.getElementById("editor");
  if (E.why) {
    box.replaceChildren(el("legend", {}, "A new board"), el("p", { class: "hint", id: "edit-message" },
      `Counts and shape are fixed here: ${E.why}.`));
    return;
  }
  const num = (id, label, value, holder = "edit-inputs") => {
    const span = document.getElementById(holder).appendChild(el("span", { class: "edit-field" }));
    span.appendChild(el("label", { for: id }, label));
    span.appendChild(el("input", { type: "number", id, min: 1, step: 1, value: String(value) }));
  };
  D.devices.forEach((name, d) => num(`edit-count-${d}`, name, D.counts[d]));
  num("edit-rows", "rows", E.rows, "edit-shape");
  num("edit-cols", "columns", E.cols, "edit-shape");
  const read = (id) => { const v = document.getElementById(id).value.trim(); return v === "" ? NaN : Number(v); };
  const style = document.getElementById("edit-dummies");
  // the spec's own board (placer's optimised arrangement among them) kept to go back to
  const spec = { counts: D.counts, budget: D.budget, arrangements: D.arrangements };
  document.getElementById("edit-back").addEventListener("click", () => {
    Object.assign(D, spec);
    D.devices.forEach((_, d) => { document.getElementById(`edit-count-${d}`).value = String(D.counts[d]); });
    document.getElementById("edit-rows").value = String(E.rows);
    document.getElementById("edit-cols").value = String(E.cols);
    style.value = E.dummies;
    state.field = null;
    state.focus = [0, 0];
    drawTitle();
    drawLegend();
    load(0);
    const msg = document.getElementById("edit-message");
    msg.textContent = "The spec's own board again, placer's arrangement with it.";
    msg.className = "good";
  });
  style.value = E.dummies;
  document.getElementById("edit-make").addEventListener("click", () => {
    makeBoard(D.devices.map((_, d) => read(`edit-count-${d}`)), read("edit-rows"), read("edit-cols"),
      style.value);
  });
}

// ---------------------------------------------------------------- guided steps
const STEPS = [
  ["1. A gradient and two centroids",
    ["A process gradient makes every unit a little stronger on one side of the die than on the other. " +
     "Under a linear gradient a device behaves like one unit at its centroid, the mean position of its units, " +
     "so two devices differ by the gradient times the distance between their centroids.",
     (D.exercise ? "On a clustered start" : "Load <b>clustered</b>") +
     ": the circles (centroids) sit apart and the linear error is large; the curve on the right " +
     "shows the error for every direction the gradient might take. Now swap units until the circles meet: " +
     "the linear error falls to zero in every direction at once.",
     "The shading round the units is the field itself (blue below the units' mean, red above). Turn it with " +
     "the <b>direction</b> slider: the error along the set direction (the red mark on the curve) changes, the " +
     "worst-direction figure does not; the <b>gradient</b> slider scales both."]],
  ["2. When centroids agree: curvature",
    ["With the centroids together, a curved field (temperature around a hot block, stress near an edge) still " +
     "separates devices whose units are spread differently: one sits more in the middle, the other further out. " +
     "That is the quadratic error, set by the difference of the devices' second moments.",
     (D.exercise ? "Interdigitated and mirrored orders (outside an exercise, their buttons load them) "
                 : "Compare <b>interdigitated</b> and <b>mirrored</b>: both") +
     " may cancel the linear term, but the quadratic one differs. " +
     "Try swapping an inner unit of one device with an outer unit of another and watch it move.",
     "Set the <b>gradient</b> to 0 and the shading shows the bowl alone. Move its centre with the hot spot " +
     "sliders (or <b>Place hot spot</b> and click a slot): a bowl off the centre is the bowl at the centre " +
     "plus a linear tilt, so devices whose centroids meet keep the same bowl error wherever the hot spot " +
     "sits, and devices whose centroids are apart do not."]],
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
// the figures, the board's marks and (after a control moved or a unit went onto a dummy
// or an empty slot) the shading, from the model as it stands
function update(reshade) {
  const sc = figures(state.model, state.field);
  state.sc = sc;
  if (reshade) shadeField(sc);
  drawMarkers(sc);
  drawFigures(sc);
  const rt = routingFigures(state.route);
  drawRouting(rt);
  if (D.exercise) drawExercise(rt);
  showField();
  document.body.dataset.swaps = String(state.history.length);
}

function drawTitle() {
  document.getElementById("title").textContent =
    `${D.name}: ${D.devices.map((n, d) => `${n} = ${D.counts[d]}`).join(", ")}`;
}

drawTitle();
document.getElementById("step-back").addEventListener("click", () => { state.step = Math.max(0, state.step - 1); drawStep(); });
document.getElementById("step-next").addEventListener("click", () => { state.step = Math.min(STEPS.length - 1, state.step + 1); drawStep(); });
document.getElementById("export").addEventListener("click", exportPattern);
document.getElementById("print").addEventListener("click", () => window.print());
drawLegend();
drawStep();
drawHandout();
fieldControls();
editorControls();
if (D.exercise) startExercise();
load(D.exercise ? D.exercise.start : 0);
document.body.dataset.ready = "true";

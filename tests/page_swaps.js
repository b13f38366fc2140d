// The lesson page's incremental model against its own from-scratch build, in Node:
//   node tests/page_swaps.js placer/present/web/lesson.js DATA.json SWAPS SEED
// DATA.json is a lesson page's data (placer/present/lesson.py). From the first
// arrangement it makes SWAPS swaps between random slots (units, dummies and empty slots
// alike) with the page's setSlot updates, one slot at a time, and after each slot builds
// the board again from scratch (boardModel) and compares: the integer sums and the edge
// counts exactly, the correlated pair sums to a relative 1e-12; after each whole swap
// also every figure (under a field drawn at random each time) to 1e-12, and the budget
// every 20 swaps; at the end, a copy made before the first swap (copyModel) still
// equals the board as loaded. Prints a JSON summary.
"use strict";
const fs = require("fs");
const vm = require("vm");

const [script, dataPath, swapsArg, seedArg] = process.argv.slice(2);
const text = fs.readFileSync(script, "utf8");
const start = text.indexOf("// ---------------------------------------------------------------- the model");
const end = text.indexOf("// ---------------------------------------------------------------- drawing");
if (start < 0 || end < start) throw new Error("the model and budget sections were not found");
const ctx = { D: JSON.parse(fs.readFileSync(dataPath, "utf8")), result: null };
vm.createContext(ctx);
vm.runInContext("const DUMMY = -1, EMPTY = -2;\n" + text.slice(start, end), ctx);

let seed = Number(seedArg) >>> 0;
function rand() {                       // mulberry32: a small seeded generator
  seed = (seed + 0x6D2B79F5) >>> 0;
  let t = seed;
  t = Math.imul(t ^ (t >>> 15), t | 1);
  t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
  return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
}

const REL = 1e-12;
const failures = [];
let worst = 0;
function close(what, got, want, scale) {
  const err = Math.abs(got - want) / Math.max(Math.abs(want), scale, 1e-300);
  worst = Math.max(worst, err);
  if (!(err <= REL)) failures.push({ what, got, want });
}

// every number of a score or budget object, flattened to name -> value
function flatten(obj, prefix, out) {
  if (typeof obj === "number") out[prefix] = obj;
  else if (obj && typeof obj === "object") {
    for (const [k, v] of Object.entries(obj)) {
      if (k === "pair" || (prefix === "" && k === "field")) continue;   // a reference, the input
      flatten(v, prefix ? `${prefix}.${k}` : k, out);
    }
  }
  return out;
}

// the integer sums and edge counts exactly, the correlated pair sums to rounding
function sameSums(model, fresh, when) {
  for (let d = 0; d < D.devices.length; d++) {
    if (model.n[d] !== fresh.n[d]) failures.push({ what: `n ${d}`, when });
    if (model.edge[d] !== fresh.edge[d]) failures.push({ what: `edge ${d}`, when });
    for (let k = 0; k < 6; k++) {
      if (model.sums[d][k] !== fresh.sums[d][k]) failures.push({ what: `sum ${d} ${k}`, when });
    }
  }
  let covScale = 0;
  for (const v of fresh.cov) covScale = Math.max(covScale, Math.abs(v));
  fresh.cov.forEach((v, k) => close(`cov ${k} at ${when}`, model.cov[k], v, covScale));
}

const D = ctx.D;
const ids = D.arrangements[0].ids.map((row) => row.slice());
const rows = ids.length, cols = ids[0].length;
const [px, py] = D.pitch_um;
const model = ctx.boardModel(ids);
// the page keeps a copy as loaded (its "was" figures): no swap may reach it
const loaded = ctx.copyModel(model), loadedIds = ids.map((row) => row.slice());
const swaps = Number(swapsArg);
let changed = 0;
for (let step = 1; step <= swaps; step++) {
  const i = Math.floor(rand() * rows * cols), j = Math.floor(rand() * rows * cols);
  const a = ids[Math.floor(i / cols)][i % cols], b = ids[Math.floor(j / cols)][j % cols];
  if (a !== b) changed++;
  ids[Math.floor(i / cols)][i % cols] = b;
  // slot i first (a board with one unit more of b and one less of a: the sums alone
  // are compared there), then slot j: setSlot must hold on its own, not only in pairs
  ids[Math.floor(j / cols)][j % cols] = b;
  ctx.setSlot(model, i, b);
  sameSums(model, ctx.boardModel(ids), `half of swap ${step}`);
  ids[Math.floor(j / cols)][j % cols] = a;
  ctx.setSlot(model, j, a);
  const fresh = ctx.boardModel(ids);
  sameSums(model, fresh, `swap ${step}`);
  // a field drawn at random: any direction, up to twice the spec's strength and
  // curvature, its centre anywhere on the grid or at the centre of the units
  const f = {
    g: 2 * rand() * (D.linear_ppm_per_um || 10), theta: 360 * rand(),
    h: 2 * rand() * (D.quadratic_ppm_per_um2 || 0.1),
    spot: rand() < 0.3 ? null : [rand() * cols * px, -rand() * rows * py],
  };
  const got = ctx.figures(model, f), want = ctx.figures(fresh, f);
  // a figure that cancels to zero is compared at the scale of its kind
  const extent = Math.hypot(cols * px, rows * py);
  const scales = { linear: f.g * extent, along: f.g * extent, quadratic: f.h * extent ** 2,
    bowl: f.h * extent ** 2, field: f.g * extent + f.h * extent ** 2, corr: D.correlated.sigma_ppm,
    centroid: extent, centre: extent, spot: extent, rel: extent, offset: extent, m2: extent ** 2, dc: extent };
  const scaleOf = (name) => {
    for (const [k, v] of Object.entries(scales)) if (name.split(".").includes(k)) return v;
    return 0;
  };
  const fg = flatten(got, "", {}), fw = flatten(want, "", {});
  for (const k of Object.keys(fw)) close(`${k} at ${step}`, fg[k], fw[k], scaleOf(k));
  if (D.budget && step % 20 === 0) {
    const fn = D.budget.kind === "dac" ? ctx.dacBudget : ctx.ratioBudget;
    const bg = flatten(fn(got), "", {}), bw = flatten(fn(want), "", {});
    const bscale = Math.max(1e-12, ...Object.values(bw).map(Math.abs));
    for (const k of Object.keys(bw)) close(`budget ${k} at ${step}`, bg[k], bw[k], 1e-9 * bscale);
  }
}
sameSums(loaded, ctx.boardModel(loadedIds), "the copy as loaded, after every swap");
process.stdout.write(JSON.stringify({ swaps, changed, worst, failures: failures.slice(0, 20),
  n_failures: failures.length }));

// The lesson page's routing cost (the "routing cost" section of
// placer/present/web/lesson.js) in Node, without a browser:
//   node tests/page_routing.js placer/present/web/lesson.js DATA.json SWAPS SEED
// DATA.json is a lesson page's data (placer/present/lesson.py). For every arrangement it
// prints the routing figures built from scratch; then, from the first arrangement, it
// makes SWAPS swaps between random slots with the page's routingSwap and after each one
// compares the updated model with a rebuild (routingModel) -- counts exactly, wire
// lengths to 1e-12 relative -- and prints the last board and its figures.
"use strict";
const fs = require("fs");
const vm = require("vm");

const [script, dataPath, swapsArg, seedArg] = process.argv.slice(2);
const text = fs.readFileSync(script, "utf8");
const start = text.indexOf("// ---------------------------------------------------------------- the model");
const end = text.indexOf("// ---------------------------------------------------------------- drawing");
if (start < 0 || end < start) throw new Error("the model section was not found");
const ctx = { D: JSON.parse(fs.readFileSync(dataPath, "utf8")), result: null, args: null };
vm.createContext(ctx);
vm.runInContext("const DUMMY = -1, EMPTY = -2;\n" + text.slice(start, end), ctx);
const run = (code, args) => { ctx.args = args; vm.runInContext(`result = ${code};`, ctx); return ctx.result; };

let seed = Number(seedArg) >>> 0;
function rand() {                       // mulberry32: a small seeded generator
  seed = (seed + 0x6D2B79F5) >>> 0;
  let t = seed;
  t = Math.imul(t ^ (t >>> 15), t | 1);
  t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
  return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
}

const loaded = ctx.D.arrangements.map((a) =>
  run("routingFigures(routingModel(args.ids, args.orient))", a));
const a0 = ctx.D.arrangements[0];
const ids = a0.ids.map((r) => r.slice()), orient = a0.orient.map((r) => r.slice());
const rm = run("routingModel(args.ids, args.orient)", { ids, orient });
const rows = ids.length, cols = ids[0].length;
const failures = [];
let changed = 0;
for (let k = 0; k < Number(swapsArg); k++) {
  const i = Math.floor(rand() * rows * cols), j = Math.floor(rand() * rows * cols);
  const [r1, c1, r2, c2] = [Math.floor(i / cols), i % cols, Math.floor(j / cols), j % cols];
  if (ids[r1][c1] !== ids[r2][c2]) changed++;
  for (const g of [ids, orient]) { const t = g[r1][c1]; g[r1][c1] = g[r2][c2]; g[r2][c2] = t; }
  run("routingSwap(args.rm, args.i, args.j)", { rm, i, j });
  const now = run("routingFigures(args.rm)", { rm });
  const fresh = run("routingFigures(routingModel(args.ids, args.orient))", { ids, orient });
  for (const key of ["tracks", "breaks", "unpaired", "widest"]) {
    if (now[key] !== fresh[key]) failures.push({ swap: k, key, got: now[key], want: fresh[key] });
  }
  fresh.tree.forEach((v, d) => {
    if (Math.abs(now.tree[d] - v) > 1e-12 * Math.max(v, 1)) failures.push({ swap: k, key: `tree ${d}`, got: now.tree[d], want: v });
  });
}
const last = run("routingFigures(args.rm)", { rm });
process.stdout.write(JSON.stringify({ loaded, swaps: Number(swapsArg), changed, failures,
                                      board: { ids, orient }, last }));

// Runs the lesson page's formulas (the "model" and "budget" sections of
// placer/present/web/lesson.js) in Node, without a browser, on the golden vectors:
//   node tests/page_model.js placer/present/web/lesson.js tests/golden/page_vectors.json
// prints, per vector, the figures under the keys the page shows them by (data-figure).
"use strict";
const fs = require("fs");
const vm = require("vm");

const [script, vectors] = process.argv.slice(2);
const text = fs.readFileSync(script, "utf8");
const start = text.indexOf("// ---------------------------------------------------------------- the model");
const end = text.indexOf("// ---------------------------------------------------------------- drawing");
if (start < 0 || end < start) throw new Error("the model and budget sections were not found");
const ctx = { Math, BigInt, Array, Number, String, Object, JSON, result: null };
vm.createContext(ctx);
vm.runInContext("const DUMMY = -1, EMPTY = -2; var D = null;\n" + text.slice(start, end), ctx);

const out = [];
for (const v of JSON.parse(fs.readFileSync(vectors, "utf8")).vectors) {
  ctx.D = v.data;
  vm.runInContext("D = this.D; result = score(D.arrangements[0].ids);", ctx);
  const sc = ctx.result;
  const fig = {
    linear_ppm: sc.worst.linear.value, quadratic_ppm: sc.worst.quadratic.value,
    correlated_sigma_ppm: sc.worst.corr.value, white_sigma_ppm: sc.worst.white.value,
    bowl_ppm: sc.worst.bowl.value,
  };
  // grade gives the error along a direction only where the spec gives one
  if (v.data.direction_deg !== null && v.data.direction_deg !== undefined) fig.along_ppm = sc.worst.along.value;
  for (const dv of sc.devices) {
    fig[`centroid_x:${dv.name}`] = dv.centroid[0];
    fig[`centroid_y:${dv.name}`] = dv.centroid[1];
    fig[`offset_um:${dv.name}`] = dv.offset;
    fig[`edge_units:${dv.name}`] = dv.edge;
  }
  if (v.data.budget && v.data.budget.kind === "ratio") {
    vm.runInContext("result = ratioBudget(score(D.arrangements[0].ids));", ctx);
    for (const ln of ctx.result) {
      fig[`gradient_pct:${ln.device}`] = ln.gradient;
      fig[`quadratic_pct:${ln.device}`] = ln.quadratic;
      fig[`clm_pct:${ln.device}`] = ln.clm;
      fig[`random_sigma_pct:${ln.device}`] = ln.sigma;
      fig[`within_tolerance:${ln.device}`] = ln.within;
      fig[`range_low:${ln.device}`] = ln.low;
      fig[`range_high:${ln.device}`] = ln.high;
    }
  } else if (v.data.budget) {
    vm.runInContext("result = dacBudget(score(D.arrangements[0].ids));", ctx);
    const b = ctx.result;
    fig.worst_gradient_inl_lsb = b.inl;
    fig.worst_gradient_dnl_lsb = b.dnl;
    fig.quadratic_inl_lsb = b.qinl;
    fig.quadratic_dnl_lsb = b.qdnl;
  }
  out.push({ name: v.name, figures: fig });
}
process.stdout.write(JSON.stringify(out));

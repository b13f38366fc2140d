// The lesson page's new boards (the "a new board" section of
// placer/present/web/lesson.js) in Node, without a browser:
//   node tests/page_boards.js placer/present/web/lesson.js CASES.json
// CASES.json is a list of {data, counts, rows, cols, style}: data holds what the page's
// data gives these functions (devices, routing). For each case it prints the clustered,
// interdigitated and mirrored boards the page builds (ids and orientations), one JSON
// list; tests/test_page_boards.py holds them to placer's baseline_patterns.
"use strict";
const fs = require("fs");
const vm = require("vm");

const [script, casesPath] = process.argv.slice(2);
const text = fs.readFileSync(script, "utf8");
const cut = (from, to) => {
  const a = text.indexOf(from), b = text.indexOf(to);
  if (a < 0 || b < a) throw new Error(`section ${from} was not found`);
  return text.slice(a, b);
};
const model = cut("// ---------------------------------------------------------------- the model",
  "// ---------------------------------------------------------------- drawing");
const boards = cut("// ---------------------------------------------------------------- a new board",
  "// what is wrong with a request for a new board");
const ctx = { D: null, result: null, args: null };
vm.createContext(ctx);
vm.runInContext("const DUMMY = -1, EMPTY = -2;\n" + model + boards, ctx);
const out = [];
for (const c of JSON.parse(fs.readFileSync(casesPath, "utf8"))) {
  ctx.D = c.data;
  ctx.args = c;
  vm.runInContext(`result = (() => {
    const cores = textbookCores(args.counts, args.rows * args.cols), made = {};
    for (const m of ["clustered", "interdigitated", "mirrored"]) {
      const ids = fullBoard(cores[m], args.rows, args.cols, args.style);
      made[m] = { ids, orient: boardOrientations(ids) };
    }
    return made;
  })();`, ctx);
  out.push(ctx.result);
}
process.stdout.write(JSON.stringify(out));

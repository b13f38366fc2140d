"""Mutation run over the formula modules: does every formula have a test that fails.

Run:  python tests/mutation.py [--modules model/variation model/budget ...] [--jobs 2]
                               [--list-only] [--out mutation-report.txt]

Run:  python tests/mutation.py --kinds semantic --whole-suite [--modules ...]

Each mutant changes one thing in one function of a module. *Operator* mutants change an
arithmetic operator (+ -, * /, ** *), a comparison (< <=, > >=), a numeric constant
(doubled, or 0 <-> 1) or a unary minus (dropped). *Semantic* mutants make the mistakes a
person makes in a formula: two arguments of a call swapped (``f(a, b)`` -> ``f(b, a)``,
commutative functions left out), a factor dropped (``a * b`` -> ``a`` and -> ``b``, ``a /
b`` -> ``a``) and a sum taken for a root-sum-square (``sqrt(a + b)`` -> ``sqrt(a) +
sqrt(b)``, ``hypot(a, b)`` -> ``abs(a) + abs(b)``).

The formula tests (tests/test_formulas.py, test_budget.py, test_model.py, test_workload.py,
test_search.py's exactness checks, the modules' doctests) and the mutated module's own
tests (MODULE_TESTS) run first on a copy of the package holding the mutant; with
``--whole-suite`` a mutant they miss is run again against the whole default suite
(every test file, as ``pytest`` runs them locally), and only a mutant that passes that
too *survives*. Survivors are printed with their line,
for a person to judge: a survivor on a formula line is a missing test; one on a message,
a default or a guard may be harmless (say why in DEVELOPERS.md).
"""

from __future__ import annotations

import argparse
import ast
import os
import shutil
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
MODULES = ["model/variation", "model/budget", "model/grade", "model/exact_moments",
           "model/routing_estimate", "layout/wiring_error", "layout/parasitics",
           "search/_problem", "search/_compiled", "search/baselines", "jobs/workload"]
TESTS = ["tests/test_formulas.py", "tests/test_budget.py", "tests/test_model.py",
         "tests/test_workload.py",
         "tests/test_search.py::test_exact_search_agrees_with_plain_enumeration",
         "tests/test_search.py::test_keys_of_a_baseline_equal_grade_with_an_offset_centre",
         "tests/test_layout.py::test_sensitivity_contributions_add_up_to_the_worst_pair_error",
         # the examples in the formula modules' docstrings are checks too
         "--doctest-modules", "placer/model/variation.py", "placer/model/budget.py",
         "placer/model/grade.py", "placer/model/exact_moments.py",
         "placer/jobs/workload.py"]
WHOLE = ["tests"]
#: the tests of each module beyond the formula tests (they run with them, first)
MODULE_TESTS = {
    "layout/parasitics": ["tests/test_parasitics.py", "tests/test_parasitics_checker.py",
                          "tests/test_wiring.py"],
    "layout/wiring_error": ["tests/test_wiring.py", "tests/test_wiring_objective.py"],
    "model/routing_estimate": ["tests/test_wiring_objective.py", "tests/test_layout.py"],
    "search/_problem": ["tests/test_search.py", "tests/test_constraints.py"],
    "search/_compiled": ["tests/test_search.py", "tests/test_constraints.py"],
    "search/baselines": ["tests/test_search.py", "tests/test_constraints.py"],
    "model/variation": ["tests/test_page_vectors.py"],
    "model/budget": ["tests/test_page_vectors.py"],
    "model/grade": ["tests/test_page_vectors.py", "tests/test_layout.py"],
}
#: calls whose first two arguments may be swapped without changing the result
_COMMUTATIVE = {"min", "max", "maximum", "minimum", "hypot", "add", "multiply", "isclose",
                "allclose", "array_equal", "logical_and", "logical_or", "gcd", "lcm",
                "fmax", "fmin", "union1d", "intersect1d", "dot", "inner", "zip", "print",
                "isinstance", "issubclass", "getattr", "hasattr", "setattr", "setdefault",
                "get", "pop", "replace", "split", "startswith", "endswith", "format",
                "join", "append", "insert", "add_argument", "raise_signal", "kill",
                "signal", "open", "write", "LayoutError", "SpecError", "LimitError",
                "PlacerError", "RouteError", "TemplateError", "OutputError"}
_SQRT = {"sqrt"}
COPIED = ["placer", "tests", "samples", "templates", "pyproject.toml"]
_SWAP = {ast.Add: ast.Sub, ast.Sub: ast.Add, ast.Mult: ast.Div, ast.Div: ast.Mult,
         ast.Pow: ast.Mult, ast.FloorDiv: ast.Div}
_CMP = {ast.Lt: ast.LtE, ast.LtE: ast.Lt, ast.Gt: ast.GtE, ast.GtE: ast.Gt}


@dataclass(frozen=True)
class Mutant:
    """One change: module, line, what was done and the mutated source."""

    module: str
    line: int
    what: str
    source: str


class _InFunctions(ast.NodeVisitor):
    """Visits function bodies only, skipping docstrings, messages and raised errors;
    subclasses append (node, kind) to ``sites``."""

    def __init__(self) -> None:
        self.sites: list[tuple[ast.AST, str]] = []
        self.depth = 0

    def visit_FunctionDef(self, node: ast.FunctionDef) -> None:
        self.depth += 1
        for stmt in node.body:
            if isinstance(stmt, ast.Expr) and isinstance(stmt.value, ast.Constant):
                continue                              # the docstring
            self.visit(stmt)
        self.depth -= 1

    def visit_JoinedStr(self, node: ast.JoinedStr) -> None:
        return                                        # f-strings: messages

    def visit_Raise(self, node: ast.Raise) -> None:
        return


class _Sites(_InFunctions):
    """Every operator-mutant site inside a function body."""

    def visit_BinOp(self, node: ast.BinOp) -> None:
        if self.depth and type(node.op) in _SWAP:
            self.sites.append((node, "op"))
        self.generic_visit(node)

    def visit_Compare(self, node: ast.Compare) -> None:
        if self.depth and len(node.ops) == 1 and type(node.ops[0]) in _CMP:
            self.sites.append((node, "cmp"))
        self.generic_visit(node)

    def visit_UnaryOp(self, node: ast.UnaryOp) -> None:
        if self.depth and isinstance(node.op, ast.USub):
            self.sites.append((node, "neg"))
        self.generic_visit(node)

    def visit_Constant(self, node: ast.Constant) -> None:
        if (self.depth and isinstance(node.value, int | float)
                and not isinstance(node.value, bool)):
            self.sites.append((node, "const"))


def _call_name(node: ast.Call) -> str:
    f = node.func
    return f.id if isinstance(f, ast.Name) else (f.attr if isinstance(f, ast.Attribute) else "")


class _Semantic(_InFunctions):
    """Every site of a semantic mutant inside a function body: (node, kind)."""

    def visit_BinOp(self, node: ast.BinOp) -> None:
        if self.depth and isinstance(node.op, ast.Mult):
            self.sites += [(node, "drop-right"), (node, "drop-left")]
        elif self.depth and isinstance(node.op, ast.Div):
            self.sites.append((node, "drop-right"))
        self.generic_visit(node)

    def visit_Call(self, node: ast.Call) -> None:
        name = _call_name(node)
        if self.depth:
            pos = [a for a in node.args if not isinstance(a, ast.Starred)]
            if (len(pos) >= 2 and len(pos) == len(node.args) and name not in _COMMUTATIVE
                    and ast.dump(pos[0]) != ast.dump(pos[1])):
                self.sites.append((node, "swap"))
            if (name in _SQRT and len(node.args) == 1 and isinstance(node.args[0], ast.BinOp)
                    and isinstance(node.args[0].op, ast.Add)):
                self.sites.append((node, "rss"))
            if name == "hypot" and len(node.args) == 2:
                self.sites.append((node, "hypot"))
        self.generic_visit(node)


def _semantic_change(node: ast.AST, kind: str) -> tuple[ast.AST, str]:
    """The replacement of ``node`` for a semantic mutant, and what it did."""
    if kind == "drop-right":
        assert isinstance(node, ast.BinOp)
        return node.left, f"factor dropped: {ast.unparse(node)} -> {ast.unparse(node.left)}"
    if kind == "drop-left":
        assert isinstance(node, ast.BinOp)
        return node.right, f"factor dropped: {ast.unparse(node)} -> {ast.unparse(node.right)}"
    assert isinstance(node, ast.Call)
    if kind == "swap":
        new = ast.Call(node.func, [node.args[1], node.args[0], *node.args[2:]], node.keywords)
        return new, f"arguments swapped: {ast.unparse(node)[:60]}"
    if kind == "rss":
        add = node.args[0]
        assert isinstance(add, ast.BinOp)
        new = ast.BinOp(ast.Call(node.func, [add.left], []), ast.Add(),
                        ast.Call(node.func, [add.right], []))
        return new, f"sum for root-sum-square: {ast.unparse(node)[:60]}"
    a, b = node.args
    new = ast.BinOp(ast.Call(ast.Name("abs", ast.Load()), [a], []), ast.Add(),
                    ast.Call(ast.Name("abs", ast.Load()), [b], []))
    return new, f"sum for root-sum-square: {ast.unparse(node)[:60]}"


class _Replace(ast.NodeTransformer):
    def __init__(self, target: ast.AST, new: ast.AST) -> None:
        self.target, self.new = target, new

    def generic_visit(self, node: ast.AST) -> ast.AST:
        if node is self.target:
            return self.new
        return super().generic_visit(node)


def semantic_mutants(module: str) -> list[Mutant]:
    """Every semantic mutant of placer/<module>.py."""
    text = (ROOT / "placer" / f"{module}.py").read_text()
    finder = _Semantic()
    finder.visit(ast.parse(text))
    out = []
    for i in range(len(finder.sites)):
        tree = ast.parse(text)
        f = _Semantic()
        f.visit(tree)
        node, kind = f.sites[i]
        new, what = _semantic_change(node, kind)
        tree = ast.fix_missing_locations(_Replace(node, new).visit(tree))
        source = ast.unparse(tree)
        out.append(Mutant(module, getattr(node, "lineno", 0), what, source))
    return out


def mutants(module: str) -> list[Mutant]:
    """Every single-change mutant of placer/<module>.py (``module`` a path below placer/)."""
    path = ROOT / "placer" / f"{module}.py"
    text = path.read_text()
    out = []
    finder = _Sites()
    finder.visit(ast.parse(text))
    count = len(finder.sites)
    for i in range(count):
        tree = ast.parse(text)
        f = _Sites()
        f.visit(tree)
        node, kind = f.sites[i]
        line = getattr(node, "lineno", 0)
        if kind == "op":
            assert isinstance(node, ast.BinOp)
            old = type(node.op)
            node.op = _SWAP[old]()
            what = f"{old.__name__} -> {type(node.op).__name__}"
        elif kind == "cmp":
            assert isinstance(node, ast.Compare)
            old = type(node.ops[0])
            node.ops = [_CMP[old]()]
            what = f"{old.__name__} -> {type(node.ops[0]).__name__}"
        elif kind == "neg":
            assert isinstance(node, ast.UnaryOp)
            node.op = ast.UAdd()
            what = "unary minus dropped"
        else:
            assert isinstance(node, ast.Constant)
            v = node.value
            new = 1 if v == 0 else (0 if v == 1 else v * 2)
            node.value = new
            what = f"constant {v!r} -> {new!r}"
        out.append(Mutant(module, line, what, ast.unparse(tree)))
    return out


def _copy(origin: Path, dest: Path) -> None:
    for part in COPIED:
        src = origin / part
        if src.is_dir():
            shutil.copytree(src, dest / part, ignore=shutil.ignore_patterns("__pycache__"))
        elif src.exists():
            shutil.copy2(src, dest / part)


def _run(m: Mutant, workdir: Path, timeout: float, origin: Path = ROOT,
         tests: list[str] | None = None) -> bool:
    """True if the tests fail (the mutant is killed); the copy is taken from origin."""
    with tempfile.TemporaryDirectory(dir=workdir) as tmp:
        # a whole copy, run from inside it: the checkout (and an editable install of
        # it) must not shadow the mutated package
        _copy(origin, Path(tmp))
        (Path(tmp) / "placer" / f"{m.module}.py").write_text(m.source)
        env = dict(os.environ, PYTHONPATH=tmp, PYTHONDONTWRITEBYTECODE="1")
        try:
            res = subprocess.run([sys.executable, "-m", "pytest", "-x", "-q", "-p",
                                  "no:cacheprovider", "--no-header", "-o", "addopts=",
                                  *(tests or [*TESTS, *MODULE_TESTS.get(m.module, [])])],
                                 cwd=tmp, env=env, capture_output=True,
                                 timeout=timeout)
        except subprocess.TimeoutExpired:
            return True                             # a hang counts as caught
        return res.returncode != 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--modules", nargs="+", default=MODULES)
    ap.add_argument("--kinds", choices=["operator", "semantic", "all"], default="all")
    ap.add_argument("--whole-suite", action="store_true",
                    help="run the formula tests' survivors against the whole suite")
    ap.add_argument("--survivors", default=None,
                    help="only the mutants listed as SURVIVED in this earlier report")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--timeout", type=float, default=300.0)
    ap.add_argument("--list-only", action="store_true")
    ap.add_argument("--out", default=None)
    args = ap.parse_args()
    all_m = []
    for mod in args.modules:
        if args.kinds in ("operator", "all"):
            all_m += mutants(mod)
        if args.kinds in ("semantic", "all"):
            all_m += semantic_mutants(mod)
    if args.survivors:
        listed = {ln.split("    |")[0].removeprefix("SURVIVED ")
                  for ln in Path(args.survivors).read_text().splitlines()
                  if ln.startswith("SURVIVED ")}
        all_m = [m for m in all_m if f"{m.module}.py:{m.line}: {m.what}" in listed]
    print(f"{len(all_m)} mutants in {', '.join(args.modules)}", flush=True)
    if args.list_only:
        for m in all_m:
            print(f"{m.module}.py:{m.line}: {m.what}")
        return 0
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory() as work:
        # one snapshot of the checkout: edits made while the run goes on do not leak in
        snap = Path(work) / "snapshot"
        snap.mkdir()
        _copy(ROOT, snap)
        # the unchanged copy must pass and a broken one must fail, or the run means nothing
        mod = args.modules[0]
        text = (ROOT / "placer" / f"{mod}.py").read_text()
        if _run(Mutant(mod, 0, "none", text), Path(work), args.timeout, snap):
            print("the tests fail on an unchanged copy: fix them first", file=sys.stderr)
            return 1
        if not _run(Mutant(mod, 0, "broken", text + "\nraise ImportError('mutant')\n"),
                    Path(work), args.timeout, snap):
            print("a copy that cannot import passed: the copy is not what runs",
                  file=sys.stderr)
            return 1
        done = [0]

        def run_one(m: Mutant) -> bool:
            k = _run(m, Path(work), args.timeout, snap)
            done[0] += 1
            if not k or done[0] % 50 == 0:
                print(f"[{done[0]}/{len(all_m)}] {'killed' if k else 'passed'}: "
                      f"{m.module}.py:{m.line}: {m.what}", flush=True)
            return k

        with ThreadPoolExecutor(args.jobs) as pool:
            killed = list(pool.map(run_one, all_m))
        if args.whole_suite:
            missed = [i for i, k in enumerate(killed) if not k]
            print(f"{len(missed)} passed the formula tests; running them against the whole "
                  "suite", flush=True)
            with ThreadPoolExecutor(args.jobs) as pool:
                again = list(pool.map(lambda i: _run(all_m[i], Path(work), args.timeout * 4,
                                                     snap, WHOLE), missed))
            for i, k in zip(missed, again, strict=True):
                killed[i] = k
    lines = []
    survivors = [m for m, k in zip(all_m, killed, strict=True) if not k]
    for m in survivors:
        src = (ROOT / "placer" / f"{m.module}.py").read_text().splitlines()[m.line - 1].strip()
        lines.append(f"SURVIVED {m.module}.py:{m.line}: {m.what}    | {src}")
    summary = (f"{len(all_m)} mutants, {len(all_m) - len(survivors)} killed, "
               f"{len(survivors)} survived, {time.perf_counter() - t0:.0f} s")
    report = "\n".join([summary, *lines])
    print(report)
    if args.out:
        Path(args.out).write_text(report + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Single-operator mutants of the numba kernel's helpers, run against the differential tests.

mutmut cannot mutate ``tolerance/kernel.py`` cheaply: every mutant would recompile the fused
kernel (one to two minutes).  This script makes the same kind of one-token mutants itself and
runs the kernel as plain Python (``NUMBA_DISABLE_JIT=1``), where a mutant costs one pytest run of
the selected tests (about a minute on the shared 2-core machine, less when a test fails early).
The one trig test that needs the compiled kernel's NaN for sin(inf) (Python's math.sin raises)
is deselected.

Mutation operators (the usual ones, as in mutmut): ``+``↔``-``, ``*``↔``/``, ``+=``↔``-=``,
a comparison flipped at its boundary (``<``↔``<=``, ``>``↔``>=``, ``==``↔``!=``), a unary minus
dropped, ``and``↔``or``, a numeric literal ``c`` → ``c + 1``.  Scope: every function of
kernel.py decorated with ``nb.njit`` except the fused ``chunk_pass`` driver (its loop bookkeeping
is exercised by every test; the helpers hold the physics), i.e. the trig replacements, the metric,
azimuth, axial ratio, propagation, spectrum, band summary, histogram folding and line averaging.

Each mutant is written as the whole module through ``ast.unparse`` into a private copy of the
package (the unmutated ``ast.unparse`` copy is run first as a control), and
``python -m pytest -x`` runs there with ``PYTHONPATH`` pointing at the copy.  A uniformly random
sample (``--n``, ``--seed``) of all mutants is run; results go to a JSON-lines file.

Usage (from the repository root)::

    python tests/mutation/kernel_mutants.py --list                 # count the mutants
    nice -n 19 python tests/mutation/kernel_mutants.py --n 30 --seed 18 --out kernel_mutants.jsonl
"""

from __future__ import annotations

import argparse
import ast
import json
import os
import random
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
KERNEL = ROOT / "tolerance" / "kernel.py"
EXCLUDED = {"chunk_pass"}
# Python's math.sin raises on inf where the compiled kernel returns NaN: that one test holds
# only for the compiled kernel.
DESELECT = ["tests/test_kernel_trig.py::test_sincos_beyond_its_range_and_nan_fall_back"]
TESTS = [
    "tests/test_kernel_trig.py",
    "tests/test_reported_quantities.py",
    "tests/test_differential.py",
]

_BIN = {ast.Add: ast.Sub, ast.Sub: ast.Add, ast.Mult: ast.Div, ast.Div: ast.Mult}
_CMP = {
    ast.Lt: ast.LtE,
    ast.LtE: ast.Lt,
    ast.Gt: ast.GtE,
    ast.GtE: ast.Gt,
    ast.Eq: ast.NotEq,
    ast.NotEq: ast.Eq,
}
_SYM = {
    ast.Add: "+",
    ast.Sub: "-",
    ast.Mult: "*",
    ast.Div: "/",
    ast.Lt: "<",
    ast.LtE: "<=",
    ast.Gt: ">",
    ast.GtE: ">=",
    ast.Eq: "==",
    ast.NotEq: "!=",
    ast.And: "and",
    ast.Or: "or",
}


def _is_jitted(fn: ast.FunctionDef) -> bool:
    for d in fn.decorator_list:
        target = d.func if isinstance(d, ast.Call) else d
        if isinstance(target, ast.Attribute) and target.attr == "njit":
            return True
    return False


def _targets(tree: ast.Module):
    """Functions to mutate: jitted helpers, not the driver."""
    return [
        n
        for n in tree.body
        if isinstance(n, ast.FunctionDef) and _is_jitted(n) and n.name not in EXCLUDED
    ]


def _is_docstring(node, parent) -> bool:
    return (
        isinstance(parent, ast.Expr)
        and isinstance(node, ast.Constant)
        and isinstance(node.value, str)
    )


def enumerate_mutants(source: str):
    """Every (function, walk index, operator, line, description) of the module's helpers."""
    tree = ast.parse(source)
    out = []
    for fn in _targets(tree):
        for i, node in enumerate(ast.walk(fn)):
            if i == 0:
                continue  # the def itself
            line = getattr(node, "lineno", None)
            if isinstance(node, ast.BinOp) and type(node.op) in _BIN:
                new = _BIN[type(node.op)]
                out.append((fn.name, i, "binop", line, f"{_SYM[type(node.op)]} -> {_SYM[new]}"))
            elif isinstance(node, ast.AugAssign) and type(node.op) in _BIN:
                new = _BIN[type(node.op)]
                out.append(
                    (fn.name, i, "augassign", line, f"{_SYM[type(node.op)]}= -> {_SYM[new]}=")
                )
            elif isinstance(node, ast.Compare) and len(node.ops) == 1 and type(node.ops[0]) in _CMP:
                new = _CMP[type(node.ops[0])]
                out.append(
                    (fn.name, i, "compare", line, f"{_SYM[type(node.ops[0])]} -> {_SYM[new]}")
                )
            elif isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
                out.append((fn.name, i, "usub", line, "unary minus dropped"))
            elif isinstance(node, ast.BoolOp):
                new = ast.Or if isinstance(node.op, ast.And) else ast.And
                out.append((fn.name, i, "boolop", line, f"{_SYM[type(node.op)]} -> {_SYM[new]}"))
            elif (
                isinstance(node, ast.Constant)
                and isinstance(node.value, (int, float))
                and not isinstance(node.value, bool)
            ):
                out.append((fn.name, i, "constant", line, f"{node.value!r} -> {node.value + 1!r}"))
    return out


def apply(source: str, fn_name: str, index: int, kind: str) -> str:
    """The module's text with the one mutation applied (through ast.unparse)."""
    tree = ast.parse(source)
    fn = next(f for f in _targets(tree) if f.name == fn_name)
    node = list(ast.walk(fn))[index]
    if kind in ("binop", "augassign"):
        node.op = _BIN[type(node.op)]()
    elif kind == "compare":
        node.ops = [_CMP[type(node.ops[0])]()]
    elif kind == "boolop":
        node.op = ast.Or() if isinstance(node.op, ast.And) else ast.And()
    elif kind == "constant":
        node.value = node.value + 1
    elif kind == "usub":
        # replace the UnaryOp by its operand in its parent
        for parent in ast.walk(fn):
            for field, value in ast.iter_fields(parent):
                if value is node:
                    setattr(parent, field, node.operand)
                elif isinstance(value, list):
                    for j, v in enumerate(value):
                        if v is node:
                            value[j] = node.operand
    else:  # pragma: no cover
        raise ValueError(kind)
    return ast.unparse(tree)


def _copy_tree(dest: Path) -> None:
    for name in ("tolerance", "tests", "materials"):
        shutil.copytree(
            ROOT / name,
            dest / name,
            ignore=shutil.ignore_patterns("__pycache__", "*.nbi", "*.nbc", "output"),
        )
    shutil.copy(ROOT / "pyproject.toml", dest / "pyproject.toml")


def run_tests(work: Path, tests, timeout: float):
    env = dict(os.environ)
    env.update(
        NUMBA_DISABLE_JIT="1",
        PYTHONPATH=str(work),
        PYTHONDONTWRITEBYTECODE="1",
    )
    cmd = [
        sys.executable,
        "-m",
        "pytest",
        "-x",
        "-q",
        "-p",
        "no:cacheprovider",
        "-p",
        "no:randomly",
        *tests,
        *(f"--deselect={d}" for d in DESELECT),
    ]
    t0 = time.monotonic()
    try:
        p = subprocess.run(cmd, cwd=work, env=env, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return "timeout", time.monotonic() - t0, ""
    first = next(
        (ln for ln in p.stdout.splitlines() if ln.startswith("FAILED") or ln.startswith("ERROR")),
        "",
    )
    status = (
        "survived"
        if p.returncode == 0
        else ("killed" if p.returncode == 1 else f"error {p.returncode}")
    )
    return status, time.monotonic() - t0, first


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--list", action="store_true", help="print the mutants and exit")
    ap.add_argument("--n", type=int, default=30, help="sample size")
    ap.add_argument("--seed", type=int, default=18)
    ap.add_argument("--out", default="kernel_mutants.jsonl")
    ap.add_argument("--timeout", type=float, default=900.0, help="per mutant [s]")
    ap.add_argument("--only", type=int, nargs="*", help="run these mutant numbers (of --list)")
    ap.add_argument("--tests", nargs="*", default=TESTS)
    ap.add_argument("--skip-control", action="store_true", help="do not run the unmutated copy")
    args = ap.parse_args(argv)

    source = KERNEL.read_text()
    mutants = enumerate_mutants(source)
    if args.list:
        for k, m in enumerate(mutants):
            print(k, *m)
        print(len(mutants), "mutants")
        return 0
    # run in the sampled (random) order, so that a run stopped early is still a uniform sample
    picks = args.only if args.only else random.Random(args.seed).sample(range(len(mutants)), args.n)
    print(f"{len(mutants)} mutants; running {len(picks)}: {picks}", flush=True)
    with tempfile.TemporaryDirectory(prefix="kmut") as tmp:
        work = Path(tmp)
        _copy_tree(work)
        target = work / "tolerance" / "kernel.py"
        control = ast.unparse(ast.parse(source))
        target.write_text(control)
        if not args.skip_control:
            status, secs, first = run_tests(work, args.tests, args.timeout)
            print(f"control (unmutated, unparsed): {status} in {secs:.0f} s {first}", flush=True)
            if status != "survived":
                return 1
        with open(args.out, "a") as log:
            for k in picks:
                fn, idx, kind, line, desc = mutants[k]
                text = apply(source, fn, idx, kind)
                if text == control:
                    status, secs, first = "identical", 0.0, ""
                else:
                    target.write_text(text)
                    status, secs, first = run_tests(work, args.tests, args.timeout)
                rec = dict(
                    number=k,
                    function=fn,
                    line=line,
                    kind=kind,
                    change=desc,
                    status=status,
                    seconds=round(secs, 1),
                    first_failure=first,
                )
                log.write(json.dumps(rec) + "\n")
                log.flush()
                print(json.dumps(rec), flush=True)
        target.write_text(source)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

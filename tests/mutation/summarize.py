"""Count mutmut's results by module and category, and list the survivors with their diffs.

Run from the repository root after ``mutmut run`` (it reads ``mutants/tolerance/*.meta`` and the
mutated sources that mutmut writes there)::

    python tests/mutation/summarize.py                      # counts per module and category
    python tests/mutation/summarize.py --survivors          # plus each survivor's one-line diff
    python tests/mutation/summarize.py --names FILE         # only the mutants named in FILE
    python tests/mutation/summarize.py --dispositions tests/mutation/dispositions.tsv

``dispositions.tsv`` records, for mutants mutmut left alive, what was done (one a line, tab
separated: name, disposition, detail): ``existing`` (killed by a test outside mutmut's test
selection, verified with run_mutant.sh), ``new`` (killed by a test added for it, verified),
``equivalent`` (argued in the detail), ``open`` (not killed, reason in the detail).  With it the
counts "after" are: killed = mutmut's kills + existing + new, over the checked mutants less the
equivalent ones.

Categories, from each mutant's diff (statements normalised by ``ast.unparse``, so a multi-line
statement is one line):

* ``message``: the change is inside a ``raise`` statement, a ``RetolError(...)`` or a
  ``warnings.warn(...)`` call, or changes only string constants (error wording, field labels,
  detail and reason texts) on a line that neither compares them nor uses them as keys;
* ``loader``: any other change in the material-file and CSV loaders of ``dispersion.py``;
* ``physics``: everything else (the physics, the statistics, the decision).
"""

from __future__ import annotations

import argparse
import ast
import collections
import difflib
import json
import math
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
MUTANTS = ROOT / "mutants" / "tolerance"
LOADERS = {
    "_require",
    "_coeff_block",
    "material_from_dict",
    "opt_number",
    "load_material_file",
    "_load_table",
    "_materials_folder",
    "_builtin",
    "list_materials",
    "get_material",
}
STATUS = {1: "killed", 3: "killed", 0: "survived", 5: "no tests", 33: "no tests", None: "unchecked"}
STATUS.update({36: "timeout", -24: "timeout", 24: "timeout", 152: "timeout", 255: "timeout"})


def _functions(path: Path) -> dict[str, ast.AST]:
    tree = ast.parse(path.read_text())
    out = {}
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and "__mutmut_" in node.name:
            out[node.name] = node
    return out


class _Strip(ast.NodeTransformer):
    def visit_Constant(self, node):
        if isinstance(node.value, (str, bytes)):
            return ast.copy_location(ast.Constant(value="S"), node)
        return node


def _body(fn) -> list[str]:
    """The function's text, signature included, under one name."""
    f = ast.FunctionDef(name="f", args=fn.args, body=fn.body, decorator_list=[], returns=None)
    return ast.unparse(ast.fix_missing_locations(f)).splitlines()


def _strip(fn) -> str:
    stripped = _Strip().visit(ast.parse("\n".join(_body(fn)))).body[0]
    return ast.dump(stripped.args) + "\n".join(ast.dump(st) for st in stripped.body)


def _is_logic(line: str) -> bool:
    """A comparison, a membership test or a subscript by a string constant (strings blanked)."""
    code = re.sub(r"'[^']*'|\"[^\"]*\"", "S", line.lstrip("+- "))
    member = re.search(r"\bin\b", code) and not code.startswith("for ")
    return bool(re.search(r"==|!=|\[S\]|\.get\(S", code) or member)


def classify(name: str, funcs: dict) -> tuple[str, str]:
    """(category, one-line diff) of mutant ``name`` (e.g. x_wilson__mutmut_3)."""
    base = name.rsplit("__mutmut_", 1)[0]
    orig, mut = funcs[base + "__mutmut_orig"], funcs[name]
    a, b = _body(orig), _body(mut)
    old = [ln.strip() for ln in difflib.ndiff(a, b) if ln.startswith("- ")]
    new = [ln.strip() for ln in difflib.ndiff(a, b) if ln.startswith("+ ")]
    diff = " | ".join(old) + "  ==>  " + " | ".join(new)
    changed = old + new
    fn = base.split("ǁ")[-1].removeprefix("x_")
    if any(re.search(r"\braise\b|RetolError\(|warnings\.warn\(", ln) for ln in changed):
        return "message", diff
    # a string that is compared or used as a key is logic, not wording
    logic = any(_is_logic(ln) for ln in changed)
    if _strip(orig) == _strip(mut) and not logic:
        return "message", diff
    if fn in LOADERS or any(fn.startswith(x) for x in ()):
        return "loader", diff
    return "physics", diff


def wilson(k: int, n: int, z: float = 1.959964) -> tuple[float, float]:
    """Wilson (1927) score interval of k/n at 95 %."""
    if n == 0:
        return float("nan"), float("nan")
    p = k / n
    den = 1 + z * z / n
    c = (p + z * z / (2 * n)) / den
    h = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return max(0.0, c - h), min(1.0, c + h)


def load(names=None, everything=False):
    rows = []
    for meta in sorted(MUTANTS.glob("*.meta")):
        module = meta.name.removesuffix(".py.meta")
        codes = json.loads(meta.read_text())["exit_code_by_key"]
        funcs = None
        for key, code in sorted(codes.items()):
            if names is not None and key not in names:
                continue
            if code is None and not everything:
                rows.append(dict(name=key, module=module, status="unchecked", category="?"))
                continue
            status = STATUS.get(code, "suspicious")
            if funcs is None:
                funcs = _functions(MUTANTS / f"{module}.py")
            short = key.split(".", 2)[2]
            category, diff = classify(short, funcs)
            rows.append(dict(name=key, module=module, status=status, category=category, diff=diff))
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--survivors", action="store_true")
    ap.add_argument("--names", help="file with one mutant name a line")
    ap.add_argument("--json", help="write every row to this file")
    ap.add_argument("--all", action="store_true", help="classify the unchecked mutants too")
    ap.add_argument("--dispositions", help="tab-separated name, disposition, detail")
    args = ap.parse_args(argv)
    names = set(Path(args.names).read_text().split()) if args.names else None
    rows = load(names, args.all)
    table = collections.Counter((r["module"], r["category"], r["status"]) for r in rows)
    statuses = ["killed", "survived", "no tests", "timeout", "suspicious", "unchecked"]
    print("module/category".ljust(30), *(s.rjust(10) for s in statuses))
    for module, category in sorted({(m, c) for m, c, _ in table}):
        print(
            f"{module}/{category}".ljust(30),
            *(str(table[module, category, s]).rjust(10) for s in statuses),
        )
    for category in ("physics", "message", "loader"):
        k = sum(v for (m, c, s), v in table.items() if c == category and s in ("killed", "timeout"))
        n = sum(v for (m, c, s), v in table.items() if c == category and s not in ("unchecked",))
        lo, hi = wilson(k, n)
        score = f"{100 * k / max(n, 1):.1f} %"
        print(f"{category}: {k}/{n} killed ({score}, Wilson 95 % {100 * lo:.1f}–{100 * hi:.1f} %)")
    if args.dispositions:
        disp = {}
        for ln in Path(args.dispositions).read_text().splitlines():
            if ln.strip() and not ln.startswith("#"):
                name, what, *_ = ln.split("\t")
                disp[name] = what
        print("after the dispositions:")
        for category in ("physics", "message", "loader"):
            rs = [r for r in rows if r["category"] == category and r["status"] != "unchecked"]
            eq = sum(1 for r in rs if disp.get(r["name"]) == "equivalent")
            k = sum(
                1
                for r in rs
                if r["status"] in ("killed", "timeout")
                or disp.get(r["name"]) in ("existing", "new")
            )
            n = len(rs) - eq
            lo, hi = wilson(k, n)
            undecided = sum(
                1 for r in rs if r["status"] not in ("killed", "timeout") and r["name"] not in disp
            )
            print(
                f"  {category}: {k}/{n} non-equivalent killed ({100 * k / max(n, 1):.1f} %, "
                f"Wilson 95 % {100 * lo:.1f}–{100 * hi:.1f} %), {eq} equivalent, "
                f"{undecided} without a disposition"
            )
    if args.survivors:
        for r in rows:
            if r["status"] in ("survived", "no tests", "suspicious"):
                print(r["status"], r["category"], r["name"], "::", r["diff"])
    if args.json:
        Path(args.json).write_text(json.dumps(rows, indent=1))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

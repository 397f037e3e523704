"""Benchmark: what OLS's precision rule costs where it does not refine, and where it does.

    .venv/bin/python benchmarks/bench_precision.py [--repeats 5] [--sizes 2000x10,100000x20,1200000x6]
        [--poly-rows 21,2000,100000] [--runs demo,panel] [--panel-series 20] [--panel-months 60]
        [--baseline-source DIR]

Not a test. ``least_squares`` refines a fit in twice the working precision (models/refined)
when its rule says so (a condition number above REFINE_ABOVE_CONDITION, or fewer than
REFINE_BELOW correct digits estimated in a coefficient), and refines (X'X)⁻¹ too below
REFINE_COVARIANCE_BELOW (models/ols). Timed here, each
the median of ``--repeats``, the variants of one case interleaved in every repeat (a shared
machine's speed drifts over minutes; interleaving spreads the drift over all of them alike):

(a) the ordinary path's cost of the rule. Designs: an intercept and p − 1 standard normal
    drivers (numpy, seeded), the target their sum with normal coefficients plus standard
    normal noise (condition numbers near 1), at the sizes of ``--sizes`` (rows x columns).
    ``least_squares(refine=None)`` (castline as it runs: the rule decides, and does not
    refine here) against ``refine=False`` (the ordinary path without the rule) and against a
    hand-written fit: columns scaled to unit length, scipy's economic QR, the coefficients
    and the diagonal of (X'X)⁻¹ by triangular solves (``hand_written`` below);
(b) the cost where it pays. Two polynomial designs, each an intercept and x's powers formed
    as castline forms them (core.double_double.power2): degree 5 of x uniform on [0, 20] to
    three decimals, and degree 10 of x uniform on [−8.8, −3.1] to six decimals (NIST's
    hardest linear problem's shape), at the rows of ``--poly-rows``; ``refine=None`` (which
    refines) against ``refine=False``, with the digits each gets: ``fit.precision.digits``
    (the estimate), and at 100 rows or fewer the log relative error against the exact
    rational least-squares solution (``exact_coefficients``: the normal equations solved in
    ``fractions.Fraction``, as tests/models/test_precision_rule.py does);
(c) the whole ``castline run`` as a user runs it, each a process of its own (PYTHONPATH set to
    the tree, as bench_small does), on the shipped demo (configs/compost_demo.yaml) and on a
    generated panel (bench_small's data: stores x months, three numeric drivers; OLS pooled
    and ``{kind: ols, per_series: true}``, rolling origin): this tree; this tree with its
    ``least_squares`` held to the ordinary path ("ordinary path": refine=False, so what is
    left of the rule is the batched per-series fit handing the series it names to
    least_squares); this tree without the rule ("rule off": that, and the batched fit keeping
    every series) — both set by an import hook in the timed process itself (``HOOK``: nothing
    in pipeline/ is changed or asked); and, with ``--baseline-source DIR``, the same command
    from an older tree (a checkout from before the refinement, e.g. ``git worktree add
    /tmp/bench-base a95194a``). Once more, untimed, with the hook counting how many fits the
    rule refined in the run, and why. Each process's wall time is printed beside its CPU time
    (user + system, its forked copies' included, from os.wait4), which other work on a shared
    machine sways less; the targets are on the wall time.

Targets: castline / ordinary <= 1.05 in (a): the rule must not slow the ordinary path
measurably; this tree / ordinary path, / rule off and / baseline <= 1.05 in (c): a whole run
no slower for the rule, wherever it fires; castline / hand-written <= 2 in (a) (castline's fit
does more: a pivoted QR, two refinement steps against its own residuals, the condition number
by singular values, the leverage and R²). In (b) no target: the refinement costs what it costs
where the digits call for it. Printed beside the figures, never asserted: a shared or slow
machine misses them without anything being wrong. The data are random (numpy, seeded); no
value in them is a reference value; the exact rational solutions in (b) are.
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_name] = "1"   # before numpy loads: one thread, as the timed processes have

import argparse  # noqa: E402
import math  # noqa: E402
import re  # noqa: E402
import shutil  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from fractions import Fraction  # noqa: E402
from functools import partial  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import scipy.linalg  # noqa: E402
import yaml  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_small import build_panel, demo_copy, environment  # noqa: E402  (the same panel and environment)

from pipeline.core.double_double import power2  # noqa: E402
from pipeline.models.ols import REFINE_ABOVE_CONDITION, REFINE_BELOW, REFINE_COVARIANCE_BELOW, least_squares  # noqa: E402

TARGET_RULE, TARGET_HAND, TARGET_RUN = 1.05, 2.0, 1.05
BATCH_SECONDS = 0.2   # each timed batch repeats a fit until it takes about this long

# castline's run with an import hook on models.ols and models.per_series: it changes them as
# they load, in whichever process loads them (a forked copy inherits the hook), so the run
# imports and forks as it always does; it says so on stderr, for the benchmark to check.
# "hold": every least_squares fit on the ordinary path (its _least_squares, which every call
# goes through, given refine=False); the batched per-series fit still hands the series the rule
# names to least_squares. "off": that, and the batched fit keeps every series (its
# models.ols' REFINE_BELOW and REFINE_ABOVE_CONDITION, read by needs_refining at each call, set
# to −inf and inf): castline without the rule. "count": every fit
# as castline makes it, each reported on stderr with the ordinary solve's estimated digits and
# condition number (an untimed run: it solves twice).
HOOK = r"""
import importlib.abc, importlib.machinery, sys
MODE = {mode!r}
class Hook(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path, target=None):
        if name not in ("pipeline.models.ols", "pipeline.models.per_series"):
            return None
        spec = importlib.machinery.PathFinder.find_spec(name, path)
        load = spec.loader.exec_module
        def exec_module(module):
            load(module)
            if name.endswith("per_series"):
                return
            if MODE == "off":
                module.REFINE_BELOW, module.REFINE_ABOVE_CONDITION = float("-inf"), float("inf")
                print("rule hook in place", file=sys.stderr)
            solve = module._least_squares
            def ordinary(x, y, names, centered_r2, refine):
                return solve(x, y, names, centered_r2, False)
            def counted(x, y, names, centered_r2, refine):
                fit, plain = solve(x, y, names, centered_r2, refine), solve(x, y, names, centered_r2, False)
                sys.stderr.write(f"fit: refined {{fit.precision.refined}} digits {{plain.precision.digits}} "
                                 f"condition {{plain.condition_number}}\n")
                sys.stderr.flush()
                return fit
            module._least_squares = counted if MODE == "count" else ordinary
            print("hook in place", file=sys.stderr)
        spec.loader.exec_module = exec_module
        return spec
sys.meta_path.insert(0, Hook())
from pipeline.__main__ import entry
entry()
"""
ORDINARY, RULE_OFF, COUNT = (HOOK.format(mode=mode) for mode in ("hold", "off", "count"))
MARKERS = {ORDINARY: ("hook in place",), RULE_OFF: ("hook in place", "rule hook in place"),
           COUNT: ("hook in place",)}


def process(arguments: list[str], env: dict[str, str], cwd: Path, markers=()) -> tuple[float, float, str]:
    """Return one process's wall time, its CPU time (user + system, its forked copies' too, from
    os.wait4) and its stderr; stop the benchmark if it fails, or if a hook's marker is missing
    from its stderr."""
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        start = time.perf_counter()
        child = subprocess.Popen([sys.executable, *arguments], env=env, cwd=cwd, stdout=out, stderr=err)
        _, status, usage = os.wait4(child.pid, 0)
        elapsed = time.perf_counter() - start
        out.seek(0)
        err.seek(0)
        stderr = err.read()
        if os.waitstatus_to_exitcode(status) != 0 or not all(marker in stderr for marker in markers):
            raise SystemExit(f"failed: {' '.join(arguments[-4:])}\n{out.read()[-2000:]}{stderr[-2000:]}")
    return elapsed, usage.ru_utime + usage.ru_stime, stderr


def rule_in_a_run(spec: Path, env: dict[str, str], folder: Path) -> str:
    """Run the spec once with COUNT's hook (untimed, in one process: CASTLINE_ONE_PROCESS, so
    that no forked copy's lines mingle with its own); describe the fits the rule refined."""
    out = folder / "counted"
    _, _, stderr = process(["-c", COUNT, "run", str(spec), "--output-folder", str(out)],
                           dict(env, CASTLINE_ONE_PROCESS="1"), folder, MARKERS[COUNT])
    shutil.rmtree(out, ignore_errors=True)
    fits = re.findall(r"^fit: refined (True|False) digits (\S+) condition (\S+)$", stderr, re.MULTILINE)
    refined = [(float(digits), float(condition)) for done, digits, condition in fits if done == "True"]
    text = f"{len(fits)} fits through least_squares, {len(refined)} refined by the rule"
    if refined:
        digits, condition = zip(*refined)
        text += (f" (the ordinary solve's estimated digits {min(digits):.1f} to {max(digits):.1f}, "
                 f"condition numbers {min(condition):.3g} to {max(condition):.3g})")
    return text


def verdict(met: bool) -> str:
    return "met" if met else "MISSED"


def interleaved(variants: dict, repeats: int) -> dict[str, float]:
    """Return each variant's median seconds per call: every repeat times each variant once, in
    turn (the order rotated each repeat), a batch of calls calibrated to BATCH_SECONDS."""
    first = next(iter(variants.values()))
    start = time.perf_counter()
    first()
    number = max(1, int(BATCH_SECONDS / max(time.perf_counter() - start, 1e-6)))
    names = list(variants)
    times: dict[str, list[float]] = {name: [] for name in names}
    for k in range(repeats):
        for name in names[k % len(names):] + names[:k % len(names)]:
            start = time.perf_counter()
            for _ in range(number):
                variants[name]()
            times[name].append((time.perf_counter() - start) / number)
    return {name: statistics.median(found) for name, found in times.items()}


def hand_written(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The fit by hand: unit-length columns, economic QR, triangular solves; the coefficients
    and the diagonal of (X'X)⁻¹."""
    norms = np.sqrt(np.einsum("ij,ij->j", x, x))
    q, r = scipy.linalg.qr(x / norms, mode="economic", check_finite=False)
    coef = scipy.linalg.solve_triangular(r, q.T @ y, check_finite=False) / norms
    r_inverse = scipy.linalg.solve_triangular(r, np.eye(x.shape[1]), check_finite=False)
    return coef, np.einsum("ij,ij->i", r_inverse, r_inverse) / norms ** 2


def random_design(rows: int, columns: int, seed: int = 23) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(rows), rng.standard_normal((rows, columns - 1))])
    return x, x @ rng.normal(size=columns) + rng.standard_normal(rows)


def ordinary_cost(sizes: list[tuple[int, int]], repeats: int) -> None:
    print("\n(a) the ordinary path: intercept + standard normal drivers, seeded "
          f"(the rule refines above a condition number of {REFINE_ABOVE_CONDITION:g} or below "
          f"{REFINE_BELOW:g} estimated digits; (X'X)^-1 below "
          f"{REFINE_COVARIANCE_BELOW:g})")
    for rows, columns in sizes:
        x, y = random_design(rows, columns)
        fit = least_squares(x, y, refine=None)
        coef, xtx = hand_written(x, y)
        apart = float(np.max(np.abs(coef - fit.coef) / np.abs(fit.coef)))
        found = interleaved({"castline": partial(least_squares, x, y, refine=None),
                             "ordinary": partial(least_squares, x, y, refine=False),
                             "hand": partial(hand_written, x, y)}, repeats)
        rule, hand = found["castline"] / found["ordinary"], found["castline"] / found["hand"]
        print(f"  {rows:>9,} x {columns:<3} condition {fit.condition_number:6.2f}, estimated digits "
              f"{fit.precision.digits:5.2f}, refined {fit.precision.refined}; coefficients "
              f"{apart:.1e} from the hand-written fit's (relative)")
        print(f"    castline {found['castline'] * 1e3:9.3f} ms   ordinary {found['ordinary'] * 1e3:9.3f} ms"
              f"   hand-written {found['hand'] * 1e3:9.3f} ms")
        print(f"    {rows:,} x {columns}: castline / ordinary = {rule:.3f} (target <= {TARGET_RULE}: "
              f"{verdict(rule <= TARGET_RULE)}); castline / hand-written = {hand:.2f} "
              f"(target <= {TARGET_HAND:g}: {verdict(hand <= TARGET_HAND)})")


POLYNOMIALS = {
    # name: (degree, x from, x to, decimals, coefficients (intercept first), noise SD, target decimals)
    "degree 5, x on [0, 20]": (5, 0.0, 20.0, 3, [3.0, -1.5, 0.8, -0.07, 0.002, -2e-5], 1.0, 3),
    # the coefficients of tests/models/test_precision_rule.py's degree-10 design
    "degree 10, x on [-8.8, -3.1]": (10, -8.8, -3.1, 6, [-1467.49, -2772.18, -2316.37, -1127.97, -354.478,
                                                       -75.1242, -10.8753, -1.06221, -0.0670191,
                                                       -0.00246781, -4.02963e-05], 0.003, 4),
}


def polynomial(name: str, rows: int, seed: int = 5) -> tuple[np.ndarray, np.ndarray]:
    degree, low, high, decimals, coef, noise, target_decimals = POLYNOMIALS[name]
    rng = np.random.default_rng(seed)
    x = np.round(np.sort(rng.uniform(low, high, rows)), decimals)
    design = np.column_stack([np.ones(rows), *power2(x, degree)])
    return design, np.round(design @ np.array(coef) + rng.normal(size=rows) * noise, target_decimals)


def exact_coefficients(matrix: np.ndarray, target: np.ndarray) -> list[Fraction]:
    """The exact least-squares coefficients of the doubles as stored: the normal equations in
    rationals (``fractions.Fraction``, nothing rounded), solved by Gauss-Jordan elimination."""
    rows = [[Fraction(float(v)) for v in row] for row in matrix]
    y = [Fraction(float(v)) for v in target]
    p = len(rows[0])
    system = [[sum(r[i] * r[j] for r in rows) for j in range(p)] + [sum(r[i] * t for r, t in zip(rows, y))]
              for i in range(p)]
    for c in range(p):
        pivot = max(range(c, p), key=lambda k: abs(system[k][c]))
        system[c], system[pivot] = system[pivot], system[c]
        system[c] = [v / system[c][c] for v in system[c]]
        for k in range(p):
            if k != c and system[k][c] != 0:
                system[k] = [a - system[k][c] * b for a, b in zip(system[k], system[c])]
    return [system[i][p] for i in range(p)]


def lowest_lre(coef: np.ndarray, exact: list[Fraction]) -> float:
    """The fewest correct digits among the coefficients: log relative error, capped at 15."""
    def lre(value: float, truth: Fraction) -> float:
        error = abs(Fraction(float(value)) - truth)
        return 15.0 if error == 0 else min(15.0, -math.log10(float(error / abs(truth))))
    return min(lre(c, t) for c, t in zip(coef, exact))


def refined_cost(rows_list: list[int], repeats: int) -> None:
    print("\n(b) where the rule refines: polynomial designs, powers by core.double_double.power2, seeded")
    for name in POLYNOMIALS:
        for rows in rows_list:
            x, y = polynomial(name, rows)
            castline, ordinary = least_squares(x, y, refine=None), least_squares(x, y, refine=False)
            found = interleaved({"castline": partial(least_squares, x, y, refine=None),
                                 "ordinary": partial(least_squares, x, y, refine=False)}, repeats)
            ratio = found["castline"] / found["ordinary"]
            kept = castline.precision
            print(f"  {name}, {rows:,} rows: condition {castline.condition_number:.2g}; refined {kept.refined} "
                  f"({kept.steps} steps, (X'X)^-1 refined {kept.covariance_refined})")
            print(f"    castline {found['castline'] * 1e3:9.3f} ms   ordinary {found['ordinary'] * 1e3:9.3f} ms   "
                  f"castline / ordinary = {ratio:.1f}x (no target)")
            line = (f"    estimated digits: castline {kept.digits:.1f}, ordinary "
                    f"{ordinary.precision.digits:.1f}")
            if rows <= 100:
                exact = exact_coefficients(x, y)
                line += (f"; against the exact solution: castline {lowest_lre(castline.coef, exact):.1f}, "
                         f"ordinary {lowest_lre(ordinary.coef, exact):.1f} digits")
            print(line)


def panel_spec(folder: Path, series: int, months: int) -> Path:
    """bench_small's panel data and spec, fitted by OLS pooled and per series, the series
    intercepts castline's default (no one-hot store column, which a per-series fit would drop)."""
    path = build_panel(folder, series, months)
    spec = yaml.safe_load(path.read_text(encoding="utf-8"))
    spec["drivers"].pop("categorical")
    spec["models"] = ["ols", {"kind": "ols", "per_series": True}]
    spec["validation"]["min_train_periods"] = max(12, months - 6 - 18)
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def whole_runs(args) -> None:
    here = environment(ROOT)
    trees = {"this tree": (None, here), "ordinary path": (ORDINARY, here), "rule off": (RULE_OFF, here)}
    if args.baseline_source is not None:
        trees["baseline"] = (None, environment(args.baseline_source.resolve()))
    print(f"\n(c) castline run, whole processes (median of {args.repeats}); baseline: "
          + (str(args.baseline_source) if args.baseline_source is not None
             else "none given (--baseline-source DIR): that ratio skipped"))
    with tempfile.TemporaryDirectory(prefix="castline-bench-precision-") as tmp:
        folder = Path(tmp)
        specs = {}
        if "demo" in args.runs:
            specs["demo (configs/compost_demo.yaml)"] = demo_copy(folder)
        if "panel" in args.runs:
            specs[f"panel ({args.panel_series} series x {args.panel_months} months)"] = panel_spec(
                folder, args.panel_series, args.panel_months)
        for label, spec in specs.items():
            found = time_trees(spec, trees, args.repeats, folder)
            print(f"  {label}: {rule_in_a_run(spec, here, folder)}")
            print(f"  {label}: " + "   ".join(f"{name} {wall:6.2f} s (CPU {cpu:6.2f} s)"
                                             for name, (wall, cpu) in found.items()))
            for other in ("ordinary path", "rule off", "baseline"):
                if other not in found:
                    print(f"    {label}: this tree / baseline skipped (no --baseline-source)")
                    continue
                ratio, cpu = (found["this tree"][k] / found[other][k] for k in (0, 1))
                print(f"    {label}: this tree / {other} = {ratio:.3f} (target <= {TARGET_RUN}: "
                      f"{verdict(ratio <= TARGET_RUN)}); in CPU time {cpu:.3f}")


def time_trees(spec: Path, trees: dict, repeats: int, folder: Path) -> dict[str, tuple[float, float]]:
    """Return each tree's median wall and CPU seconds for ``castline run`` of the spec, the trees
    interleaved (the order rotated each repeat), each run the spec's first (an empty output
    folder and ledger)."""
    out = folder / "out"
    times: dict[str, list[tuple[float, float]]] = {name: [] for name in trees}
    names = list(trees)
    for k in range(repeats):
        for name in names[k % len(names):] + names[:k % len(names)]:
            program, env = trees[name]
            command = ["-c", program] if program else ["-m", "pipeline"]
            wall, cpu, _ = process([*command, "run", str(spec), "--output-folder", str(out)], env, folder,
                                   MARKERS.get(program, ()))
            times[name].append((wall, cpu))
            shutil.rmtree(out, ignore_errors=True)
    return {name: (statistics.median(w for w, _ in found), statistics.median(c for _, c in found))
            for name, found in times.items()}


def sizes(text: str) -> list[tuple[int, int]]:
    return [(int(rows), int(columns)) for rows, columns in (size.split("x") for size in text.split(","))]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5, help="timed batches or runs of each variant (median)")
    parser.add_argument("--sizes", type=sizes, default=sizes("2000x10,100000x20,1200000x6"),
                        help="(a)'s designs, rows x columns, comma-separated")
    parser.add_argument("--poly-rows", type=lambda text: [int(v) for v in text.split(",")],
                        default=[21, 2000, 100000], help="(b)'s rows, comma-separated")
    parser.add_argument("--runs", type=lambda text: text.split(","), default=["demo", "panel"],
                        help="(c)'s specs, comma-separated: demo, panel")
    parser.add_argument("--panel-series", type=int, default=20)
    parser.add_argument("--panel-months", type=int, default=60)
    parser.add_argument("--baseline-source", type=Path, default=None,
                        help="an older castline tree (before the refinement) to time (c) against")
    args = parser.parse_args(argv)
    print(f"castline from {ROOT}; {os.cpu_count()} cores; one BLAS thread; "
          "load average {:.1f} {:.1f} {:.1f}".format(*os.getloadavg()))
    ordinary_cost(args.sizes, args.repeats)
    refined_cost(args.poly_rows, args.repeats)
    whole_runs(args)
    print("load average {:.1f} {:.1f} {:.1f} at the end (other work on the machine skews every timing)"
          .format(*os.getloadavg()))
    return 0


if __name__ == "__main__":
    sys.exit(main())

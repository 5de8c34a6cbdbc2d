"""Deliberately broken variants of the engine must fail at least one deterministic test.

Each mutation edits one line of a temporary copy of the package (the working tree is never
touched), runs the deterministic reference, core and invariance tests against that copy (first
failure stops the run), and reports whether the mutation was caught and by which test. The
unmutated copy runs first and must pass. Not part of `make test`; run it with `make mutations`:

    .venv/bin/python tests/benchmarks/mutations.py [name ...]
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PACKAGE = ROOT / "kernel_side" / "seamline"
TESTS = ["tests/reference", "tests/core", "tests/test_invariances.py"]


@dataclass(frozen=True)
class Mutation:
    name: str
    path: str        # relative to the package
    before: str      # must occur exactly once
    after: str


MUTATIONS = [
    Mutation("pilot scaling exponent p+2 in the bias estimate", "core/locpoly.py",
             "rho ** (self.p + 1) * lead", "rho ** (self.p + 2) * lead"),
    Mutation("pilot scaling exponent p+2 in the robust weights", "core/locpoly.py",
             "(h / b) ** (p + 1) * lead", "(h / b) ** (p + 2) * lead"),
    Mutation("neighbour count 2 instead of 3", "data.py",
             "donut: float = 0.0, neighbors: int = 3)", "donut: float = 0.0, neighbors: int = 2)"),
    Mutation("neighbour variance without the M/(M+1) factor", "core/neighbors.py",
             "    with np.errstate(invalid=\"ignore\", divide=\"ignore\"):\n        scale = np.sqrt(m / (m + 1.0))",
             "    with np.errstate(invalid=\"ignore\", divide=\"ignore\"):\n        scale = np.sqrt(m / m)"),
    Mutation("coverage factor exponent with (p+2) for (p+3)", "core/bandwidth.py",
             "(-p / ((2 * p + 3) * (p + 3)))", "(-p / ((2 * p + 3) * (p + 2)))"),
    Mutation("HC2 leverage exponent 2 instead of 1", "estimate/engine.py",
             "power = 1 if variance == \"hc2\" else 2", "power = 2 if variance == \"hc2\" else 2"),
    Mutation("single-row bias-reduced variance: factor 1 for 2 in B_i",
             "core/cluster_variance.py",
             "_quadratic_form(m2, u) - 2.0 * k * _quadratic_form(m1, u)",
             "_quadratic_form(m2, u) - 1.0 * k * _quadratic_form(m1, u)"),
    Mutation("HC1 factor n/(n-k-1)", "estimate/engine.py",
             "total *= n_used / (n_used - k)", "total *= n_used / (n_used - k - 1)"),
    Mutation("normal-reference kernel constant 6 sqrt(pi) for 8 sqrt(pi)", "core/kernels.py",
             "(8.0 * sqrt(pi) * r_k", "(6.0 * sqrt(pi) * r_k"),
    Mutation("IK kernel constant C_2/(2 C_1^2)", "core/kernels.py",
             "(c2 / (4.0 * c1 ** 2)) ** 0.2", "(c2 / (2.0 * c1 ** 2)) ** 0.2"),
    Mutation("cluster sums ignore the side's sign", "estimate/engine.py",
             "side_sign = self.sign * side.sign  # +sign above, -sign below", "side_sign = self.sign"),
    Mutation("robust variance uses the conventional fit's residuals", "estimate/engine.py",
             "resid = (wa.resid_b if robust else wa.resid_h) @ full", "resid = wa.resid_h @ full"),
    Mutation("covariate adjustment drops gamma's own noise", "estimate/engine.py",
             "weight = weight - wa.kw_h * (zt @", "weight = weight - 0.0 * wa.kw_h * (zt @"),
    Mutation("pilot bandwidth constant (1+2p) for (3+2p)", "core/bandwidth.py",
             "((3 + 2 * p) * v / (2 * (q - p) * bias2))", "((1 + 2 * p) * v / (2 * (q - p) * bias2))"),
    Mutation("curvature pilot on 60% of each side", "core/bandwidth.py",
             "PILOT_SHARE = 0.5", "PILOT_SHARE = 0.6"),
    Mutation("MSE rule without the regulariser", "core/bandwidth.py",
             "denom = bias2 + reg\n", "denom = bias2\n"),
    Mutation("two-step pilot without its regulariser", "core/bandwidth.py",
             "(bias_b[1] - bias_b[0]) ** 2 + sum(reg_b)", "(bias_b[1] - bias_b[0]) ** 2"),
    Mutation("two-step pilot: global fit on the nearer half", "core/bandwidth.py",
             "lam, r + 1, share=1.0)", "lam, r + 1, share=0.5)"),
    Mutation("IK second-step constant 3.5 for 3.56", "core/bandwidth.py",
             "h2 = 3.56 *", "h2 = 3.5 *"),
    Mutation("triangular kernel weight 1 - u/2", "core/kernels.py",
             "\"triangular\": (1.0, -1.0),", "\"triangular\": (1.0, -0.5),"),
]


def copy_package(target: Path) -> Path:
    dest = target / "kernel_side" / "seamline"
    shutil.copytree(PACKAGE, dest, ignore=shutil.ignore_patterns("__pycache__", "labextension"))
    return dest


def run_tests(kernel_side: Path) -> tuple[int, str, float]:
    env = dict(os.environ, PYTHONPATH=str(kernel_side), PYTHONDONTWRITEBYTECODE="1")
    start = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "pytest", "-q", "-x", "-p", "no:xdist", "-p", "no:cacheprovider",
                           "-m", "not slow", *TESTS], cwd=ROOT, env=env, capture_output=True, text=True)
    failed = next((line[len("FAILED "):].split(" - ")[0] for line in proc.stdout.splitlines()
                   if line.startswith("FAILED ")), "")
    return proc.returncode, failed, time.perf_counter() - start


def main(names: list[str]) -> int:
    chosen = [m for m in MUTATIONS if not names or any(n in m.name for n in names)]
    with tempfile.TemporaryDirectory(prefix="seamline-mutation-") as tmp:
        code, failed, secs = run_tests(copy_package(Path(tmp) / "baseline").parent)
        print(f"{'baseline (no mutation)':58} {'passes' if code == 0 else 'FAILS: ' + failed} ({secs:.0f} s)")
        if code != 0:
            return 1
        missed = 0
        for i, m in enumerate(chosen):
            pkg = copy_package(Path(tmp) / f"m{i}")
            source = pkg / m.path
            text = source.read_text()
            if text.count(m.before) != 1:
                print(f"{m.name:58} SOURCE CHANGED: {m.before!r} found {text.count(m.before)} times")
                missed += 1
                continue
            source.write_text(text.replace(m.before, m.after))
            code, failed, secs = run_tests(pkg.parent)
            if code == 1:
                print(f"{m.name:58} caught by {failed} ({secs:.0f} s)")
            else:
                missed += 1
                print(f"{m.name:58} MISSED (pytest exit {code}) ({secs:.0f} s)")
        print(f"{len(chosen) - missed} of {len(chosen)} mutations caught")
        return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

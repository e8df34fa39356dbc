"""Rejection rates under the null of every independence test (figures for
docs/independence-tests.md, section "Calibration").

Each scenario draws invented data in which the tested independence holds, runs the test many
times and counts p < 0.05. A valid level-α test rejects a true null with probability about α
(Neyman–Pearson); the binomial standard error of a rate near 0.05 over ``reps`` replications
is about ``sqrt(0.05 · 0.95 / reps)``.

Run ``python tests/benchmarks/calibration.py [--reps-scale 1.0]``; it prints a Markdown table.
The kernel figures at n = 1,000–10,000 take several minutes: ``--kernel`` adds them.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE.parent.parent))


def _gaussian_chain(n, rng):
    x = rng.normal(size=n)
    z = 0.8 * x + rng.normal(size=n)
    y = -0.6 * z + rng.normal(size=n)
    return pd.DataFrame({"x": x, "y": y, "z": z}), ("x", "y", ["z"])


def _discrete_chain(n, rng):
    z = rng.integers(0, 3, n)
    x = (z + (rng.random(n) < 0.4) * rng.integers(0, 3, n)) % 3
    y = (rng.random(n) < 0.3 + 0.2 * z).astype(int)
    return pd.DataFrame({"x": x, "y": y, "z": z}), ("x", "y", ["z"])


def _mixed_chain(n, rng):
    z = rng.normal(size=n)
    x = (rng.random(n) < 1 / (1 + np.exp(-z))).astype(int)
    group = np.where(z + rng.normal(size=n) > 0.5, "hi", np.where(z > -0.5, "mid", "lo"))
    return pd.DataFrame({"x": x, "g": group, "z": z}), ("x", "g", ["z"])


def _categories(n, rng):
    cols = {}
    for j in range(3):
        k = int(rng.integers(2, 7))
        p = rng.dirichlet(np.ones(k)) * 0.9 + 0.1 / k
        cols[f"k{j}"] = rng.choice([f"l{i}" for i in range(k)], n, p=p)
    return pd.DataFrame(cols), ("k0", "k1", ["k2"])


def _nonlinear_chain(n, rng):
    x = rng.uniform(-2, 2, n)
    z = np.sin(1.5 * x) + 0.4 * rng.normal(size=n)
    y = z ** 2 + 0.4 * rng.normal(size=n)
    return pd.DataFrame({"x": x, "y": y, "z": z}), ("x", "y", ["z"])


SCENARIOS = [
    # test, options, scenario, n, reps, description
    ("fisher-z", {}, _gaussian_chain, 200, 4000, "Gaussian chain x → z → y, x ⟂ y | z"),
    ("g-squared", {}, _discrete_chain, 1000, 2000, "discrete chain, x ⟂ y | z (3 × 2 × 3)"),
    ("g-squared", {}, _categories, 300, 1000,
     "independent categories, 2–6 levels, given one (thin tests not run)"),
    ("mixed", {}, _mixed_chain, 500, 1000,
     "binary x, 3-level g, continuous z: x ⟂ g | z"),
    ("mixed", {}, _categories, 300, 1000,
     "independent categories given one (answered by G²)"),
    ("auto", {}, _mixed_chain, 500, 500, "as for mixed (routed to mixed)"),
    ("auto", {}, _gaussian_chain, 200, 1000, "Gaussian chain (routed to fisher-z)"),
    ("kci", {"lowrank_above": 10 ** 9}, _nonlinear_chain, 300, 300,
     "nonlinear chain x → z → y, exact KCI"),
]

KERNEL = [("kci", {}, _nonlinear_chain, n, reps, "nonlinear chain, low-rank KCI")
          for n, reps in ((1000, 400), (3000, 400), (10000, 400))]


def rate(name, options, scenario, n, reps, seed=0):
    from discovery.independence import make_test
    rng = np.random.default_rng(seed)
    rejected = untestable = 0
    for r in range(reps):
        frame, (x, y, given) = scenario(n, rng)
        opts = dict(options)
        if name == "kci":
            opts.setdefault("seed", r)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            p = make_test(name, frame, **opts).test(x, y, given).pvalue
        if np.isnan(p):
            untestable += 1
        elif p < 0.05:
            rejected += 1
    return rejected, untestable


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps-scale", type=float, default=1.0)
    parser.add_argument("--kernel", action="store_true", help="add low-rank KCI at large n")
    args = parser.parse_args(argv)
    rows = SCENARIOS + (KERNEL if args.kernel else [])
    print("| test | null scenario | n | replications | rejected at α = 0.05 | rate | not run |")
    print("|---|---|---|---|---|---|---|")
    for name, options, scenario, n, reps, what in rows:
        reps = max(20, int(reps * args.reps_scale))
        t = time.perf_counter()
        rejected, untestable = rate(name, options, scenario, n, reps)
        ran = reps - untestable
        what = what.replace("|", "\\|")
        print(f"| `{name}` | {what} | {n:,} | {reps} | {rejected} | "
              f"{rejected / max(ran, 1):.3f} | {untestable} |", flush=True)
        print(f"  ({time.perf_counter() - t:.0f} s)", file=sys.stderr)


if __name__ == "__main__":
    main()

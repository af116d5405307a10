"""How fit time grows with the number of trials, for every registered surrogate.

For each model in :func:`advisor.surrogates.surrogate_names` (models whose module is
missing or fails are skipped and listed), fit the quick preset on a 6-parameter
synthetic function at several sizes ``n``, take the median wall time over repeats,
and fit a line to ``log t = a + b log n``; the slope ``b`` is the empirical scaling
exponent (1 = linear in n, 3 = the cubic cost of an exact GP solve).

Writes a JSON file of the raw timings and slopes, a log-log figure, and prints a table.

    python benchmarks/fit_scaling.py --sizes 100 200 400 800 1600 --repeats 2
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from advisor.surrogates import make_surrogate, surrogate_names  # noqa: E402


def synthetic_6d(n: int, seed: int = 0):
    """A smooth 6-D test function on [0, 1]^6 with Gaussian noise of std 0.1 (ours)."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(0.0, 1.0, (n, 6))
    f = (np.sin(3 * X[:, 0]) + X[:, 1] ** 2 + np.cos(4 * X[:, 2] * X[:, 3])
         + 0.5 * X[:, 4] - X[:, 5])
    return X, f + 0.1 * rng.standard_normal(n)


def time_fit(name: str, n: int, repeats: int) -> list[float]:
    times = []
    for r in range(repeats):
        X, y = synthetic_6d(n, seed=r)
        model = make_surrogate(name, seed=r, quick=True)
        t0 = time.perf_counter()
        model.fit(X, y)
        times.append(time.perf_counter() - t0)
    return times


def scaling_exponent(sizes, seconds) -> float:
    """Least-squares slope of log(seconds) against log(n)."""
    return float(np.polyfit(np.log(sizes), np.log(seconds), 1)[0])


def run(sizes, repeats, names=None):
    names = names or surrogate_names()
    results, skipped = {}, {}
    # Warm-up: the first torch call in a process pays one-off set-up costs.
    X, y = synthetic_6d(30)
    for name in names:
        try:
            make_surrogate(name, seed=0, quick=True).fit(X, y)
        except Exception as exc:  # a broken model is reported, not fatal
            skipped[name] = f"{type(exc).__name__}: {exc}"
    for name in names:
        if name in skipped:
            continue
        rows = []
        for n in sizes:
            t = time_fit(name, n, repeats)
            rows.append({"n": int(n), "seconds": t, "median_seconds": float(np.median(t))})
            print(f"  {name:16s} n={n:5d}  {np.median(t):8.3f} s", flush=True)
        med = [r["median_seconds"] for r in rows]
        results[name] = {"timings": rows, "scaling_exponent": scaling_exponent(sizes, med)}
    return results, skipped


def plot(results, path: Path):
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    for name, res in results.items():
        n = [r["n"] for r in res["timings"]]
        t = [r["median_seconds"] for r in res["timings"]]
        ax.loglog(n, t, marker="o", label=f"{name} (slope {res['scaling_exponent']:.2f})")
    ax.set_xlabel("training trials n (count)")
    ax.set_ylabel("fit time, quick preset (seconds)")
    ax.set_title("Fit time against data size, 6 parameters")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=120)
    plt.close(fig)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 400, 800, 1600])
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "results" /
                    "fit_scaling.json")
    ap.add_argument("--figure", type=Path, default=ROOT / "docs" / "fit_scaling.png")
    ap.add_argument("--models", nargs="+", default=None, help="default: all registered")
    args = ap.parse_args(argv)
    if len(args.sizes) < 2 or min(args.sizes) < 10:
        ap.error("--sizes needs at least two sizes, each >= 10")
    if args.repeats < 1:
        ap.error("--repeats must be at least 1")
    results, skipped = run(sorted(args.sizes), args.repeats, args.models)
    record = {"sizes": sorted(args.sizes), "repeats": args.repeats, "dimensions": 6,
              "preset": "quick", "timer": "wall clock (time.perf_counter), median",
              "torch_threads_env": os.environ.get("ADVISOR_TORCH_THREADS", "1"),
              "machine": {"python": platform.python_version(), "cpus": os.cpu_count(),
                          "load_average_1min": os.getloadavg()[0]},
              "models": results, "skipped": skipped}
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(record, indent=2))
    plot(results, args.figure)
    print(f"\n{'model':16s} " + " ".join(f"{n:>8d}" for n in record["sizes"]) + "   slope")
    for name, res in results.items():
        cells = " ".join(f"{r['median_seconds']:8.3f}" for r in res["timings"])
        print(f"{name:16s} {cells}   {res['scaling_exponent']:.2f}")
    for name, why in skipped.items():
        print(f"{name:16s} skipped ({why})")
    print(f"\nwrote {args.out} and {args.figure}")


if __name__ == "__main__":
    main()

"""Speed and memory targets of the performance issue, measured end to end.

    python benchmarks/run.py                 # both targets, writes benchmarks/results/speed.json
    python benchmarks/run.py --only 500      # just the 500-trial quick assessment
                                             # (its entry replaced, the other kept)

Targets (not timed tests; this script reports against them):

* a quick assessment of a 500-trial, 6-parameter, 4-campaign log in at most 60 s wall on
  2 cores;
* a quick assessment of a 5,000-trial, 20-parameter log in at most 300 s and under 4 GB
  peak memory (summed over the process tree), every surrogate scored or skipped with
  its reason.

Each run is the real command (`python -m advisor assess ... --quick`) in a subprocess;
peak memory is the largest sum of resident set sizes over the process and its workers,
sampled every 0.2 s with psutil, and so are the CPU seconds (user + system, summed over
the process and its workers; ``cpu_seconds``) and the 1-minute load average at the start
and the end (``load_average_start`` / ``_end``): on a shared machine the wall time
depends on the other load, the CPU seconds much less.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import psutil

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "scripts"))


def big_log(path: Path, n: int = 5000, d: int = 20, campaigns: int = 5, seed: int = 0):
    """Invented stand-in for years of logs: a smooth 20-parameter response with noise."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 1, (n, d))
    w = rng.normal(0, 1, d) * (np.arange(d) < 8)   # 8 of the 20 parameters matter
    y = np.sin(3 * X[:, :4]).sum(1) + (X - 0.5) ** 2 @ np.abs(w) + rng.normal(0, 0.1, n)
    frame = pd.DataFrame(X, columns=[f"x{i:02d}" for i in range(d)])
    frame.insert(0, "trial", np.tile(np.arange(1, n // campaigns + 1), campaigns)[:n])
    frame.insert(0, "campaign", np.repeat([f"C{i}" for i in range(campaigns)], n // campaigns)[:n])
    frame["loss"] = y
    frame.to_csv(path, index=False)
    return ["--objective", "loss", "--campaign", "campaign", "--order", "trial"]


def log_500(path: Path):
    from make_sample_logs import moulding_warpage
    moulding_warpage(seed=12, lots=4, per_lot=125).to_csv(path, index=False)
    return ["--objective", "warpage_mm", "--campaign", "lot", "--order", "run"]


def measure(cmd: list[str]) -> dict:
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    ps = psutil.Process(proc.pid)
    peak = 0
    cpu = {}  # pid -> last seen user + system seconds (a worker's last 0.2 s may be missed)
    load0 = os.getloadavg()[0]
    while proc.poll() is None:
        try:
            procs = [ps] + ps.children(recursive=True)
            peak = max(peak, sum(p.memory_info().rss for p in procs if p.is_running()))
            for p in procs:
                try:
                    t = p.cpu_times()
                    cpu[p.pid] = t.user + t.system
                except psutil.Error:
                    pass
        except psutil.Error:
            pass
        time.sleep(0.2)
    out, err = proc.communicate()
    return {"wall_seconds": time.perf_counter() - t0, "peak_rss_gb": peak / 2**30,
            "cpu_seconds": sum(cpu.values()),
            "load_average_start": load0, "load_average_end": os.getloadavg()[0],
            "returncode": proc.returncode, "stderr": err.strip()[-2000:]}


def run_case(name, make_log, limit_s, limit_gb, extra, tmp: Path) -> dict:
    log = tmp / f"{name}.csv"
    flags = make_log(log)
    out = tmp / f"out-{name}"
    cmd = [sys.executable, "-m", "advisor", "assess", str(log), *flags, "--quick",
           "--out", str(out), "--quiet", *extra]
    res = measure(cmd)
    res.update(case=name, limit_seconds=limit_s, limit_gb=limit_gb)
    js = out / f"{name}.json"
    if js.exists():
        d = json.loads(js.read_text())
        res["surrogates"] = {r["surrogate"]: (r["status"], (r.get("failures") or [{}])[0].get("error"))
                             for r in d["ranking"]}
        res["recommendation"] = d["recommendation"]["surrogate"]
        res["timing"] = d["timing"]
    res["meets_target"] = bool(res["returncode"] == 0 and res["wall_seconds"] <= limit_s
                               and (limit_gb is None or res["peak_rss_gb"] <= limit_gb))
    return res


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", choices=["500", "5000"])
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--out", default=str(ROOT / "benchmarks" / "results" / "speed.json"))
    args = ap.parse_args(argv)
    cases = cases_all = [("trials500", log_500, 60, None),
                         ("trials5000x20", big_log, 300, 4.0)]
    if args.only:
        cases = [c for c in cases if c[0] == f"trials{args.only}" or c[0].startswith(f"trials{args.only}x")]
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        for name, fn, lim_s, lim_gb in cases:
            r = run_case(name, fn, lim_s, lim_gb, ["--jobs", str(args.jobs)], Path(tmp))
            results.append(r)
            print(f"{name:16s} wall {r['wall_seconds']:7.1f} s (target {lim_s} s)  "
                  f"CPU {r['cpu_seconds']:7.1f} s  load {r['load_average_start']:.1f}  "
                  f"peak {r['peak_rss_gb']:5.2f} GB"
                  + (f" (target {lim_gb} GB)" if lim_gb else "")
                  + f"  exit {r['returncode']}  {'OK' if r['meets_target'] else 'MISSED'}")
            for s, (status, err) in (r.get("surrogates") or {}).items():
                print(f"    {s:16s} {status}{'' if not err else ': ' + err}")
            if r.get("timing"):
                print("    stages: " + ", ".join(f"{k} {v:.1f}" for k, v in r["timing"].items()))
    machine = {"cpus": os.cpu_count(), "python": sys.version.split()[0],
               "platform": sys.platform, "memory_gb": psutil.virtual_memory().total / 2**30}
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    if args.only and out.exists():
        # --only replaces its own case's entry and keeps the other case's as it was
        ran = {r["case"] for r in results}
        kept = [r for r in json.loads(out.read_text()).get("results", [])
                if r.get("case") not in ran]
        order = [c[0] for c in cases_all]
        results = sorted(kept + results,
                         key=lambda r: order.index(r["case"]) if r["case"] in order else 99)
    out.write_text(json.dumps({"machine": machine, "results": results}, indent=2))
    print(f"wrote {args.out}")


if __name__ == "__main__":
    main()

"""Log each black box as campaigns of a simple optimizer, with a deterministic cache.

The optimizer (our own, deliberately plain): ``n_random`` uniform random settings,
then each trial perturbs the best setting so far by a Gaussian step in the unit cube
whose width shrinks with the trial index (0.25 → 0.05), clipped to the box.  The step
schedule depends on the trial index only, so a short campaign is a prefix of a long
one with the same seed and the cache serves every size.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd

from .problems import PROBLEMS

__all__ = ["campaign_log", "CACHE", "N_RANDOM"]

CACHE = Path(__file__).resolve().parents[1] / "results" / "real_logs_cache.json"
N_RANDOM = 8
_MAX_TRIALS = 60


def _seed(*parts) -> int:
    h = hashlib.sha256("/".join(map(str, parts)).encode()).digest()
    return int.from_bytes(h[:8], "little") % (2 ** 63)


def _run_campaign(problem, campaign: str, n: int) -> list[dict]:
    rng = np.random.default_rng(_seed("optimizer", problem.name, campaign))
    d = len(problem.params)
    rows, best_u, best_v = [], None, None
    sign = 1.0 if problem.direction == "minimize" else -1.0
    for i in range(n):
        if i < N_RANDOM or best_u is None:
            u = rng.uniform(size=d)
        else:
            width = max(0.05, 0.25 * 0.93 ** (i - N_RANDOM))
            u = np.clip(best_u + width * rng.standard_normal(d), 0.0, 1.0)
        s = problem.settings(u)
        v = problem.evaluate(s, _seed("evaluate", problem.name, campaign, i))
        if best_v is None or sign * v < sign * best_v:
            best_u, best_v = u, v
        rows.append({**s, problem.objective: round(v, 6), "campaign": campaign, "trial": i + 1})
    return rows


def _load_cache() -> dict:
    if CACHE.exists():
        return json.loads(CACHE.read_text())
    return {}


def campaign_log(problem_name: str, campaigns: list[str], n: int) -> pd.DataFrame:
    """The first ``n`` trials of each named campaign, evaluated once and cached."""
    if n > _MAX_TRIALS:
        raise ValueError(f"at most {_MAX_TRIALS} trials per campaign")
    problem = PROBLEMS[problem_name]
    cache = _load_cache()
    changed = False
    frames = []
    for c in campaigns:
        key = f"{problem_name}/{c}"
        if key not in cache:
            cache[key] = _run_campaign(problem, c, _MAX_TRIALS)
            changed = True
        frames.append(pd.DataFrame(cache[key][:n]))
    if changed:
        CACHE.parent.mkdir(parents=True, exist_ok=True)
        tmp = CACHE.with_suffix(".tmp")
        tmp.write_text(json.dumps(cache, indent=0, sort_keys=True))
        tmp.replace(CACHE)
    return pd.concat(frames, ignore_index=True)

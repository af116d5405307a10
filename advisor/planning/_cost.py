"""Cost projection: fit and predict seconds against trials, power-law exponent.

See :mod:`advisor.planning` for the references."""

from __future__ import annotations

import math
import time
from typing import Callable, Sequence

import numpy as np

from ..errors import UsageError
from ..execution import Executor, task_seed
from ..surrogates import make_surrogate

from ._common import _check_trials, _encoding
from ._learning import _MIN_TRAIN


def scaling_exponent(sizes, seconds) -> float | None:
    """Least-squares slope ``b`` of ``log t = a + b log n`` (a power law ``t = c n^b``).

    None when fewer than two positive, finite points or fewer than two distinct sizes.
    """
    n = np.asarray(sizes, dtype=float)
    t = np.asarray(seconds, dtype=float)
    ok = np.isfinite(n) & np.isfinite(t) & (n > 0) & (t > 0)
    if ok.sum() < 2 or len(np.unique(n[ok])) < 2:
        return None
    slope, _ = np.polyfit(np.log(n[ok]), np.log(t[ok]), 1)
    return float(slope)


def _power_law_at(sizes, seconds, target) -> float | None:
    n = np.asarray(sizes, dtype=float)
    t = np.asarray(seconds, dtype=float)
    ok = np.isfinite(t) & (t > 0)
    if ok.sum() < 2 or len(np.unique(n[ok])) < 2:
        return float(t[ok][-1]) if ok.any() else None
    slope, icpt = np.polyfit(np.log(n[ok]), np.log(t[ok]), 1)
    return float(math.exp(icpt + slope * math.log(target)))


def _size_regimes(model) -> list[tuple[str, int | None]]:
    """The model's size regimes (``size_regimes()``, e.g. the GP's exact / starts on a
    subset / FITC), or one regime for a model that declares none."""
    fn = getattr(model, "size_regimes", None)
    regimes = list(fn()) if callable(fn) else []
    return regimes or [("one regime", None)]


def _regime_index(regimes, m: int) -> int:
    for i, (_, upper) in enumerate(regimes):
        if upper is None or m <= upper:
            return i
    return len(regimes) - 1


def _sizes_for_target(sizes, regimes, target) -> list[int]:
    """``sizes`` plus what the projection needs: two distinct sizes inside the regime
    of ``target`` (its lower edge + 1 and ``target`` itself, as available), so that
    the power law is never fitted across a switch of regime (issue 13)."""
    r = _regime_index(regimes, target)
    inside = {m for m in sizes if _regime_index(regimes, m) == r}
    lower = (regimes[r - 1][1] + 1) if r > 0 else 2
    for extra in (target, lower):
        if len(inside) >= 2:
            break
        if extra >= 2:
            inside.add(int(extra))
    return sorted(set(sizes) | inside)


def _per_regime(regimes, sizes, fit_s, pred_s):
    """One power law per regime: ``[{"name", "up_to", "sizes", "fit_seconds_exponent",
    "predict_seconds_exponent"}]`` for each regime that holds a measured size (an
    exponent needs two distinct sizes; a negative one is shown as None)."""
    out = []
    idx = np.array([_regime_index(regimes, m) for m in sizes])
    for r, (name, upper) in enumerate(regimes):
        sel = np.flatnonzero(idx == r)
        if not len(sel):
            continue
        ns = [sizes[k] for k in sel]
        ef = scaling_exponent(ns, [fit_s[k] for k in sel])
        ep = scaling_exponent(ns, [pred_s[k] for k in sel])
        out.append({"name": name, "up_to": upper, "sizes": ns,
                    "fit_seconds_exponent": ef if ef is None or ef >= 0 else None,
                    "predict_seconds_exponent": ep if ep is None or ep >= 0 else None,
                    "fit_seconds_exponent_raw": ef, "predict_seconds_exponent_raw": ep})
    return out


def _resampled(X, y, m, rng, bounds):
    """``m`` rows: a subsample when ``m <= n``, else all rows plus bootstrap copies with
    a tiny jitter (1e-3 of each encoded range, 1e-3 of the objective's std) so that no
    two rows coincide (a GP's kernel matrix would be singular)."""
    n = len(y)
    if m <= n:
        idx = rng.choice(n, m, replace=False)
        return X[idx], y[idx]
    extra = rng.integers(0, n, m - n)
    width = bounds[:, 1] - bounds[:, 0]
    Xe = X[extra] + rng.normal(0, 1e-3, (m - n, X.shape[1])) * width
    ye = y[extra] + rng.normal(0, 1e-3 * (np.std(y) or 1.0), m - n)
    return np.vstack([X, np.clip(Xe, bounds[:, 0], bounds[:, 1])]), np.append(y, ye)


#: Rows of the untimed warm-up fit (see _time_surrogate).
_WARM_ROWS = 32


def _time_surrogate(make, name, seed, quick, space, X, y, sizes, repeats, n_predict,
                    encoding, clock):
    rng = np.random.default_rng(task_seed(seed, "cost", name, "data"))
    bounds = space.encoded_bounds(encoding)
    X_pred = space.encode(space.sample(n_predict, rng), encoding)
    fit_s, pred_s = [], []
    # One untimed warm-up fit: first calls pay one-time costs (lazy imports, library
    # initialization) that would inflate the smallest size's time and flatten the
    # fitted exponent.  Those costs do not depend on the size, so the warm-up runs on
    # at most _WARM_ROWS rows (at the smallest size if that fails); it used to run at
    # the smallest size, a quarter of a large log, for every model.
    # The warm-up model has the quick budget: the one-time costs are the same, and a
    # thorough budget made the warm-up as dear as a timed fit (an SGHMC chain's length
    # does not depend on the rows: 14 s of the thorough 138-trial projection).
    rng_w = np.random.default_rng(task_seed(seed, "cost", "warm"))
    try:
        Xw, yw = _resampled(X, y, min(sizes[0], _WARM_ROWS), rng_w, bounds)
        make(name, seed=task_seed(seed, "cost", name, "warm"), quick=True).fit(Xw, yw)
    except Exception:
        Xw, yw = _resampled(X, y, sizes[0], rng_w, bounds)
        make(name, seed=task_seed(seed, "cost", name, "warm"), quick=quick).fit(Xw, yw)
    for m in sizes:
        Xm, ym = _resampled(X, y, m, np.random.default_rng(task_seed(seed, "cost", m)),
                            bounds)
        best_fit = best_pred = math.inf
        for r in range(repeats):
            model = make(name, seed=task_seed(seed, "cost", name, m, r), quick=quick)
            t0 = clock()
            model.fit(Xm, ym)
            t1 = clock()
            model.predict(X_pred)
            t2 = clock()
            # The minimum over repeats is the least disturbed by other work on the
            # machine (common practice, as the timeit documentation advises).
            best_fit, best_pred = min(best_fit, t1 - t0), min(best_pred, t2 - t1)
        fit_s.append(best_fit)
        pred_s.append(best_pred)
    return fit_s, pred_s


def _timing_task(*args):
    """(fit seconds, predict seconds, None) of :func:`_time_surrogate`, or (None, None,
    error text) when the model fails; a top-level function so worker processes can run
    it."""
    try:
        fit_s, pred_s = _time_surrogate(*args)
    except Exception as exc:
        return None, None, f"{type(exc).__name__}: {exc}"
    return fit_s, pred_s, None


def cost_projection(trials, surrogate_names: Sequence[str], *, seed: int,
                    quick: bool = False, budget: int, max_fit_seconds: float | None = None,
                    sizes: Sequence[int] | None = None, n_predict: int = 1000,
                    repeats: int | None = None, make: Callable = make_surrogate,
                    clock: Callable[[], float] = time.perf_counter,
                    executor: Executor | None = None) -> dict:
    """Measured fit and predict time against the number of trials, and its projection.

    For each surrogate, fit on the log resampled to a few sizes (default ``n/4``,
    ``n/2``, ``n``, and outside quick mode also ``min(n + budget, 2n)`` by bootstrap
    rows with tiny jitter) and predict at ``n_predict`` random settings (one
    acquisition sweep); the minimum over ``repeats`` runs is kept.  A power law
    ``t = c n^b`` is fitted by least squares on log-log axes (:func:`scaling_exponent`)
    *within each size regime* of the model (``size_regimes()``: for the GP the exact
    fit, the exact fit with its starts on a subset, and FITC beyond the exact limit; a
    model that declares none has one regime), and the time per iteration (one refit
    plus one prediction sweep) is projected at the next campaign's size ``n + budget``
    from the power law of the regime that size falls in.  With the default sizes, when
    fewer than two of them fall in that regime, its lower edge + 1 and the projected
    size itself are timed too, so no power law spans a change of regime.  The reported
    ``fit_seconds_exponent`` / ``predict_seconds_exponent`` are those of the projected
    size's regime; every regime's are under ``regimes``.  Each model is timed
    serially within one task, with one BLAS thread; with ``executor`` the models are
    timed in parallel, one per worker process (the assessment passes its executor: on
    its own core a model's timing is what a one-core campaign would see, and a 9-model
    projection on a 500-trial log took 21 s serially).

    ``clock`` is the wall clock by default (what a team waits for); pass
    ``time.process_time`` to measure this process's CPU time instead, which other work
    on a shared machine disturbs less (but which adds up the threads of a
    multithreaded fit).

    Every timing-derived value (the ``*_seconds*`` fields, including the exponents
    ``fit_seconds_exponent`` and ``predict_seconds_exponent``) differs between runs;
    ``over_max_fit_seconds`` is timing-derived too whenever ``max_fit_seconds`` is given.

    Returns
    -------
    dict
        ``{"logged_trials", "budget", "projected_size", "predict_points",
        "max_fit_seconds", "method", "surrogates": {name: {"sizes", "fit_seconds",
        "predict_seconds", "fit_seconds_exponent", "predict_seconds_exponent",
        "fit_seconds_exponent_raw", "predict_seconds_exponent_raw",
        "seconds_exponent_note", "regimes", "projection_regime", "projected_size",
        "projected_seconds_per_iteration", "over_max_fit_seconds", "error"}}}``.
    """
    _check_trials(trials)
    if int(budget) < 0:
        raise UsageError(f"budget={budget} must be zero or more trials", fix="pass budget >= 0")
    n = trials.n_used
    target = n + int(budget)
    default_sizes = sizes is None
    if sizes is None:
        sizes = {max(_MIN_TRAIN, n // 4), max(_MIN_TRAIN, n // 2), n}
        if not quick and target > n:
            sizes.add(min(target, 2 * n))
    sizes = sorted({int(m) for m in sizes if int(m) >= 2})
    repeats = int(repeats or (1 if quick else 3))
    jobs = []
    for name in surrogate_names:
        probe = make(name, seed=0, quick=quick)
        encoding = _encoding(probe)
        regimes = _size_regimes(probe)
        own = _sizes_for_target(sizes, regimes, target) if default_sizes else list(sizes)
        jobs.append((name, regimes, own,
                     (make, name, seed, quick, trials.space, trials.features(encoding),
                      trials.y, own, repeats, n_predict, encoding, clock)))
    # One task per model; with a parallel executor each model is timed in its own worker
    # process, one per core and one BLAS thread each, as the serial path times them
    # (Executor.map limits BLAS to one thread there too).
    timed = (executor or Executor()).map(_timing_task, [j[3] for j in jobs],
                                         label="cost projection")
    out = {}
    for (name, regimes, own, _), (fit_s, pred_s, error) in zip(jobs, timed):
        r_target = _regime_index(regimes, target)
        entry = {"sizes": own, "projected_size": target, "error": None,
                 "projection_regime": regimes[r_target][0]}
        if error is not None:  # one model's failure never stops the others
            entry.update(fit_seconds=None, predict_seconds=None, fit_seconds_exponent=None,
                         predict_seconds_exponent=None, projected_seconds_per_iteration=None,
                         fit_seconds_exponent_raw=None, predict_seconds_exponent_raw=None,
                         seconds_exponent_note=None, regimes=[],
                         over_max_fit_seconds=False, error=error)
            out[name] = entry
            continue
        # The projection uses the sizes in the target's regime only; with explicit sizes
        # none of which falls there, the nearest regime's sizes stand in (said in the
        # note below).
        in_r = [k for k, m in enumerate(own) if _regime_index(regimes, m) == r_target]
        use = in_r or [k for k, m in enumerate(own)
                       if _regime_index(regimes, m) == _regime_index(regimes, max(own))]
        ns = [own[k] for k in use]
        fs, ps = [fit_s[k] for k in use], [pred_s[k] for k in use]
        fit_t, pred_t = _power_law_at(ns, fs, target), _power_law_at(ns, ps, target)
        per_iter = None if fit_t is None or pred_t is None else fit_t + pred_t
        raw_fit, raw_pred = scaling_exponent(ns, fs), scaling_exponent(ns, ps)
        notes = []
        if not in_r:
            notes.append(f"no size was timed in the {regimes[r_target][0]} regime of the "
                         "projected size; projected from the largest timed regime")
        if any(v is not None and v < 0 for v in (raw_fit, raw_pred)):
            notes.append("time fell with size on this machine: no growth rate can be "
                         "read (noise)")
        entry.update(
            fit_seconds=[float(v) for v in fit_s], predict_seconds=[float(v) for v in pred_s],
            # A negative exponent is timing noise or a regime switch (e.g. the exact GP
            # giving way to its approximation), never a growth rate: it is shown as
            # None, the raw value kept beside it with a note.
            fit_seconds_exponent=raw_fit if raw_fit is None or raw_fit >= 0 else None,
            predict_seconds_exponent=raw_pred if raw_pred is None or raw_pred >= 0 else None,
            fit_seconds_exponent_raw=raw_fit, predict_seconds_exponent_raw=raw_pred,
            seconds_exponent_note="; ".join(notes) or None,
            regimes=_per_regime(regimes, own, fit_s, pred_s),
            projected_seconds_per_iteration=per_iter,
            over_max_fit_seconds=bool(max_fit_seconds is not None and per_iter is not None
                            and per_iter > float(max_fit_seconds)))
        out[name] = entry
    return {"logged_trials": n, "budget": int(budget), "projected_size": target,
            "predict_points": int(n_predict), "max_fit_seconds": max_fit_seconds,
            "clock": "cpu" if clock is time.process_time else "wall",
            "method": (f"fit and predict ({n_predict} points) timed at sizes "
                       f"{', '.join(map(str, sizes))} (minimum of {repeats} run(s), "
                       "one BLAS thread, "
                       + ("one model per worker process" if executor is not None and
                          (executor.jobs > 1 or executor.scheduler) else "serial")
                       + "; a model with size regimes is also timed inside the "
                       "regime of the projected size); one power law per regime, fitted "
                       "by least squares on log-log axes; projected at "
                       f"{target} trials (logged + budget) from the power law of its "
                       "regime; larger sizes than the log by bootstrap rows with tiny "
                       "jitter"),
            "surrogates": out}

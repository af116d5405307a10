"""Stand-in objectives for the simulated campaigns."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from ..execution import task_seed
from ..surrogates import make_surrogate

__all__ = ["StandIns", "posterior_standins"]

@dataclass
class StandIns:
    """Posterior draws used as simulated objectives.

    Attributes
    ----------
    frame : DataFrame
        The candidate set (logged settings first, then space samples).
    values : ndarray (n_functions, len(frame))
        Each row one drawn function on the candidate set (minimization form).
    optimum : ndarray (n_functions,)
        Each function's minimum over the candidate set (exact by construction).
    argmin : ndarray of int (n_functions,)
    n_logged : int
        How many leading rows of ``frame`` are logged settings.
    """

    frame: pd.DataFrame
    values: np.ndarray
    optimum: np.ndarray
    argmin: np.ndarray
    n_logged: int
    noise_std: float = 0.0


def posterior_standins(trials, n_functions: int, n_extra: int, seed: int, *,
                       make: Callable = make_surrogate, sampler: str = "gp",
                       quick: bool = False) -> StandIns:
    """Draw ``n_functions`` stand-in objectives from the ``sampler`` surrogate's posterior.

    The sampler is fitted on every successful logged trial; functions are drawn jointly
    with its ``sample_y`` on the logged settings plus ``n_extra`` uniform samples of
    ``trials.space``.

    Raises
    ------
    ValueError
        When the sampler has no ``sample_y`` (independent draws would not be functions).
    """
    rng = np.random.default_rng(task_seed(seed, "standins"))
    used = trials.used[trials.params].reset_index(drop=True)
    # fresh space samples only: a set that is mostly logged settings lets a setting
    # win by revisiting what the campaigns already found
    frame = trials.space.sample(int(n_extra), rng).reset_index(drop=True)
    model = make(sampler, seed=task_seed(seed, "standin-model"), quick=quick)
    if not callable(getattr(model, "sample_y", None)):
        raise ValueError(f"surrogate '{sampler}' has no sample_y; joint posterior draws "
                         "are needed for simulated campaigns")
    enc = getattr(model, "input_encoding", "onehot")
    model.fit(trials.space.encode(used, enc), trials.y)
    values = np.asarray(model.sample_y(trials.space.encode(frame, enc), n_functions, rng),
                        dtype=float).reshape(n_functions, len(frame))
    if not np.all(np.isfinite(values)):
        raise ValueError(f"surrogate '{sampler}' returned non-finite posterior draws")
    noise = getattr(model, "noise_std_", None)
    noise = float(noise) if noise is not None and np.isfinite(noise) else 0.0
    return StandIns(frame, values, values.min(axis=1), values.argmin(axis=1), 0, noise)

"""Fit-cost scaling of a real network: fixed epochs of mini-batch Adam are O(n).

Complements the planning tests (closed-form exponent; Cholesky ~ n^3): here the
project's own network block (``StackedMLP``, the DNGO architecture d→50→50→50→1) is
trained for a fixed 10 epochs at n = 2,000, 4,000 and 8,000 rows (6 inputs, batches of
64), and the fitted exponent of CPU seconds against n must lie in [0.7, 1.3] — the
number of optimizer steps is proportional to n, each step costs the same (common
practice; the band allows for per-call overhead).

Moved out of the test suite (issue 13: no wall-clock assertions in tests).  Run:
``PYTHONPATH=. python benchmarks/network_epoch_scaling.py``; prints the seconds and
the exponent and exits 1 when it leaves the band.
"""

import time

import sys

import torch

from advisor.planning import scaling_exponent
from advisor.surrogates.nets import StackedMLP


def _fixed_epoch_fit(n: int, epochs: int = 10) -> float:
    gen = torch.Generator().manual_seed(0)
    X = torch.rand(n, 6, generator=gen)
    y = torch.sin(X.sum(1, keepdim=True))
    net = StackedMLP(6, 1, hidden=(50, 50, 50), members=1, generator=gen)
    opt = torch.optim.Adam(net.parameters(), lr=1e-3)
    t0 = time.process_time()
    for _ in range(epochs):
        perm = torch.randperm(n, generator=gen)
        for start in range(0, n, 64):
            idx = perm[start:start + 64]
            opt.zero_grad()
            loss = ((net(X[idx])[0] - y[idx]) ** 2).mean()
            loss.backward()
            opt.step()
    return time.process_time() - t0


def fixed_epoch_network_fit_is_linear_in_trials():
    torch.set_num_threads(1)
    _fixed_epoch_fit(500, epochs=1)  # warm-up: first calls pay for lazy initialization
    sizes = [2000, 4000, 8000]
    seconds = [min(_fixed_epoch_fit(n) for _ in range(2)) for n in sizes]
    exponent = scaling_exponent(sizes, seconds)
    print("n:", sizes, "CPU seconds:", [round(t, 3) for t in seconds],
          "exponent:", round(exponent, 3))
    assert 0.7 <= exponent <= 1.3, (sizes, seconds, exponent)


if __name__ == "__main__":
    try:
        fixed_epoch_network_fit_is_linear_in_trials()
    except AssertionError as exc:
        print("outside the band [0.7, 1.3]:", exc)
        sys.exit(1)
    print("fit seconds scale as n^e with e in [0.7, 1.3]")

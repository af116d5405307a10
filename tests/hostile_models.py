"""Deliberately hostile user models for the robustness tests: one that never returns,
one that ends its own process, one that fails in predict on some folds only."""

import os
import time

import numpy as np


class Hangs:
    def fit(self, X, y):
        while True:  # an endless loop, as a buggy model might have
            time.sleep(0.05)

    def predict(self, X):  # pragma: no cover - never reached
        return np.zeros(len(X)), np.ones(len(X))


class ExitsProcess:
    def fit(self, X, y):
        os._exit(3)  # as a crash in compiled code would end the process

    def predict(self, X):  # pragma: no cover - never reached
        return np.zeros(len(X)), np.ones(len(X))


class FailsOnSomeFolds:
    """Mean/std of the training data; predict raises when the training set is small
    (the first folds of forward chaining), works otherwise."""

    def fit(self, X, y):
        self.n_ = len(y)
        self.m_, self.s_ = float(np.mean(y)), float(np.std(y) or 1.0)
        return self

    def predict(self, X):
        if self.n_ < 25:
            raise RuntimeError("not enough training rows for this model")
        return np.full(len(X), self.m_), np.full(len(X), self.s_)

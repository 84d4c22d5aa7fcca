"""Held-out denoising loss during training, for choosing the weights a fit keeps.

``heatwalk.fit(..., validation_fraction=f)`` keeps a share f of the data points (drawn with the
fit's seed) out of training. Their times and noised points are drawn once, so every evaluation
measures the same Monte Carlo estimate of the objective (the denoising loss, in the objective's
own units: for score matching the σ²-weighted squared score error per dimension) and differences
between evaluations are differences of the weights, not of the draws. The EMA weights of the
lowest evaluation are kept: early stopping without stopping, as the run goes on to its last step.
"""

from __future__ import annotations

import copy
import math

import torch

#: at most this many held-out points are drawn for the evaluations
VALIDATION_MAX_POINTS = 4096
#: the held-out rows and their draws use the seed plus this offset (apart from the training draws)
VALIDATION_SEED_OFFSET = 7919


class Validation:
    """Fixed draws of the held-out points, the evaluation curve and the best EMA weights so far."""

    def __init__(self, objective, drawn: dict, n_points: int, every: int, fraction: float):
        self.objective = objective
        self.drawn = drawn
        self.n_points = int(n_points)
        self.every = int(every)
        self.fraction = float(fraction)
        self.curve: list[tuple[int, float]] = []
        self.best_loss = math.inf
        self.best_step = None
        self.best_weights = None
        self._net = None

    def evaluate(self, net: torch.nn.Module, ema: list, step: int) -> float:
        """The held-out loss of the EMA weights ``ema`` (laid into a copy of ``net``); keeps them if lowest."""
        if self._net is None:
            self._net = copy.deepcopy(net)
        with torch.no_grad():
            for p, e in zip(self._net.parameters(), ema):
                p.copy_(e)
            self._net.eval()
            loss = float(self.objective.share_loss(self._net, self.drawn))
        self.curve.append((int(step), loss))
        if loss < self.best_loss:
            self.best_loss, self.best_step = loss, int(step)
            self.best_weights = [e.detach().clone() for e in ema]
        return loss

    def summary(self) -> dict:
        return {"fraction": self.fraction, "n_points": self.n_points,
                "n_evaluated": int(self.drawn["x0"].shape[0]) if hasattr(self.drawn.get("x0"), "shape") else None,
                "every": self.every, "best_step": self.best_step, "best_loss": self.best_loss,
                "last_loss": self.curve[-1][1] if self.curve else None, "curve": [list(c) for c in self.curve]}

"""Diffusion time: the training distribution of t, the sampling grid, and time features.

heatwalk parametrises noise by the Brownian time t (generator (1/2)Δ, so on
R^d the noise variance is t). Training draws t log-uniformly on
[t_min, t_max], i.e. the noise scale σ = sqrt(t) is geometric — common
practice for variance-exploding diffusions — and weights the squared score
error by t (the "σ² weighting", which makes every noise level contribute on
the same scale). Sampling runs over a geometric grid from t_max down to t_min.

Time importance sampling (``tilt`` a ∈ (-1, 1), default 0): training times are drawn from
q(u) = 1 + a (1 - 2u) on the log-time fraction u = (log t - log t_min) / (log t_max - log t_min)
instead of the uniform density 1, and each row's loss is multiplied by the weight 1 / q(u).
Then E_q[w(u) ℓ(t(u))] = ∫ q(u) ℓ / q(u) du = E_uniform[ℓ], so the objective and its minimiser are
those of the log-uniform schedule; only the variance of its estimate changes. a > 0 puts more
draws at small t (sharp structure), a < 0 at large t. The draws are an inverse-CDF transform of
the same uniform numbers as the untilted schedule, which it reproduces exactly at a = 0.
"""

from __future__ import annotations

import math

import torch

from heatwalk.checks import check_choice, check_number, check_positive_int
from heatwalk.errors import InputError
from heatwalk.spaces.base import generator_device

GRID_SPACINGS = ("geometric", "linear")


class TimeSchedule:
    """Log-uniform training times and geometric sampling grids on [t_min, t_max]."""

    def __init__(self, t_min: float, t_max: float, n_frequencies: int = 8, tilt: float = 0.0):
        if not (0 < t_min < t_max and math.isfinite(t_max)):
            raise InputError(f"time range must satisfy 0 < t_min < t_max < inf, got ({t_min}, {t_max})",
                             field="time_range")
        self.tilt = check_number("time_tilt", tilt, minimum=-1, maximum=1, open_minimum=True, open_maximum=True)
        self.t_min = float(t_min)
        self.t_max = float(t_max)
        self.n_frequencies = int(n_frequencies)
        self._log_min = math.log(self.t_min)
        self._log_span = math.log(self.t_max) - self._log_min

    def config(self) -> dict:
        out = {"t_min": self.t_min, "t_max": self.t_max, "n_frequencies": self.n_frequencies}
        if self.tilt != 0.0:  # absent when 0, so configs of untilted schedules are as before
            out["tilt"] = self.tilt
        return out

    def sample(self, n: int, generator: torch.Generator | None = None) -> torch.Tensor:
        """n times, log-uniform on [t_min, t_max] (float64; evaluation draws, never tilted)."""
        u = torch.rand(n, dtype=torch.float64, device=generator_device(generator), generator=generator)
        return torch.exp(self._log_min + self._log_span * u)

    def sample_weighted(self, n: int, generator: torch.Generator | None = None) -> tuple[torch.Tensor, torch.Tensor]:
        """n training times from the tilted density q and their weights 1/q (module docstring), both float64.

        With tilt 0 the times are those of :meth:`sample` (same generator draws) and the weights are 1.
        """
        v = torch.rand(n, dtype=torch.float64, device=generator_device(generator), generator=generator)
        a = self.tilt
        if a == 0.0:
            u = v
        else:  # inverse CDF of q: F(u) = (1 + a) u - a u², so u = ((1 + a) - sqrt((1 + a)² - 4 a v)) / (2 a)
            u = (((1 + a) - torch.sqrt((1 + a) ** 2 - 4 * a * v)) / (2 * a)).clamp(0.0, 1.0)
        weight = 1.0 / (1.0 + a * (1.0 - 2.0 * u))
        return torch.exp(self._log_min + self._log_span * u), weight

    def grid(self, steps: int, spacing: str = "geometric") -> torch.Tensor:
        """steps+1 times from t_max down to t_min (float64, on the CPU: samplers move them), geometric or linear."""
        check_positive_int("steps", steps)
        if check_choice("spacing", spacing, GRID_SPACINGS) == "linear":
            # cpu: sampling grids are made on the CPU; samplers move them to the points' device
            return torch.linspace(self.t_max, self.t_min, steps + 1, dtype=torch.float64)
        # cpu: as above
        return torch.logspace(math.log10(self.t_max), math.log10(self.t_min), steps + 1, dtype=torch.float64)

    @property
    def n_features(self) -> int:
        return 1 + 2 * self.n_frequencies

    def features(self, t: torch.Tensor) -> torch.Tensor:
        """Smooth features of log t for a network: u in [0, 1] and sin/cos(π k u), k = 1..n_frequencies."""
        u = (torch.log(t) - self._log_min) / self._log_span
        k = torch.arange(1, self.n_frequencies + 1, dtype=u.dtype, device=u.device)
        ang = math.pi * u.unsqueeze(-1) * k
        return torch.cat([u.unsqueeze(-1), torch.sin(ang), torch.cos(ang)], dim=-1)


class ClockSchedule:
    """The diffusion clock τ ∈ [0, 1] of a product space: uniform training times, a linear sampling grid,
    and features of τ (τ and sin/cos(π k τ), k = 1..n_frequencies). Each factor's own time is t_i(τ)
    (:meth:`heatwalk.spaces.Product.factor_times`)."""

    t_min = 0.0
    t_max = 1.0

    def __init__(self, n_frequencies: int = 8, kind: str = "clock"):
        if kind != "clock":
            raise InputError(f"clock schedule config has kind {kind!r}, expected 'clock'", field="schedule")
        self.n_frequencies = check_positive_int("n_frequencies", n_frequencies)

    def config(self) -> dict:
        return {"kind": "clock", "n_frequencies": self.n_frequencies}

    def sample(self, n: int, generator: torch.Generator | None = None) -> torch.Tensor:
        """n clock times, uniform on [0, 1] (float64)."""
        return torch.rand(n, dtype=torch.float64, device=generator_device(generator), generator=generator)

    def grid(self, steps: int, spacing: str = "linear") -> torch.Tensor:
        """steps + 1 clock times from 1 down to 0 (the factors' own grids follow from t_i(τ))."""
        check_positive_int("steps", steps)
        check_choice("spacing", spacing, ("linear",))
        # cpu: sampling grids are made on the CPU; samplers move them to the points' device
        return torch.linspace(1.0, 0.0, steps + 1, dtype=torch.float64)

    @property
    def n_features(self) -> int:
        return 1 + 2 * self.n_frequencies

    def features(self, tau: torch.Tensor) -> torch.Tensor:
        k = torch.arange(1, self.n_frequencies + 1, dtype=tau.dtype, device=tau.device)
        ang = math.pi * tau.unsqueeze(-1) * k
        return torch.cat([tau.unsqueeze(-1), torch.sin(ang), torch.cos(ang)], dim=-1)

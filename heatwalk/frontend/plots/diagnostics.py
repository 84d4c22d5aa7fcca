"""Pictures of a fit and of an evaluation: the training loss per step, and per-point log-likelihoods.

- :func:`plot_losses`: the loss of every training step (``Model.losses``, kept by ``heatwalk.fit``
  and saved as ``losses.csv`` in the model folder) with its running mean over ``window`` steps;
  a logarithmic axis when every loss is positive.
- :func:`plot_log_likelihoods`: histograms of per-point log-likelihoods in nats (w.r.t. the space's
  reference measure, as ``Model.log_prob`` reports them), one per named set, with each set's mean.
  A discrete model's ``log_prob`` is a lower bound (negative ELBO); the axis says so.
"""

from __future__ import annotations

import numpy as np
import torch

from heatwalk.checks import check_int
from heatwalk.errors import InputError
from heatwalk.frontend.plots.figures import DATA_COLOUR, SAMPLES_COLOUR, new_figure

_SET_COLOURS = (DATA_COLOUR, SAMPLES_COLOUR, "tab:green", "tab:purple", "tab:brown", "tab:gray")


def _loss_values(model_or_losses):
    """(losses, first step, objective name or None) from a Model or a sequence of losses."""
    if hasattr(model_or_losses, "losses") and hasattr(model_or_losses, "record"):
        model = model_or_losses
        if model.losses is None:
            raise InputError("this model has no per-step losses (its folder has no losses.csv: it was saved "
                             "before losses were kept)", field="model")
        first = int(model.record.get("resumed_from_step", 0)) + 1
        name = model.objective.config().get("name")
        return model.losses.numpy(), first, name
    values = np.asarray(torch.as_tensor(model_or_losses, dtype=torch.float64)).reshape(-1)
    return values, 1, None


def plot_losses(model_or_losses, *, window: int | None = None, size=(800, 450), dpi: int = 100, title: str = ""):
    """A Figure of the training loss per step and its running mean.

    Parameters
    ----------
    model_or_losses : a fitted :class:`heatwalk.Model` (its ``losses``; steps counted from
        ``record["resumed_from_step"] + 1``) or a 1-D sequence of losses (steps 1, 2, …).
    window : steps in the running mean (default: 1/20 of the steps, at least 1, at most 200).
    size : (width, height) in pixels.
    """
    values, first, objective = _loss_values(model_or_losses)
    if values.size == 0:
        raise InputError("no losses to draw (0 steps)", field="losses")
    bad = ~np.isfinite(values)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"losses: step {first + i} has a loss of {values[i]}, expected a finite number",
                         row=i, field="losses")
    window = min(200, max(1, values.size // 20)) if window is None else check_int("window", window, minimum=1)
    steps = np.arange(first, first + values.size)
    fig = new_figure(size, dpi)
    ax = fig.add_subplot()
    ax.plot(steps, values, color=DATA_COLOUR, lw=0.7, alpha=0.45, label="loss of each step")
    if window > 1 and values.size >= window:
        mean = np.convolve(values, np.ones(window) / window, mode="valid")
        ax.plot(steps[window - 1:], mean, color=SAMPLES_COLOUR, lw=2, label=f"mean of the last {window} steps")
    if (values > 0).all() and values.max() > 20 * values.min():  # a logarithmic axis where it spans decades
        from matplotlib.ticker import NullFormatter

        ax.set_yscale("log")
        ax.yaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("training step")
    ax.set_ylabel("training loss" + (f" ({objective} objective)" if objective else ""))
    ax.set_xlim(steps[0], steps[-1] if steps.size > 1 else steps[0] + 1)
    ax.grid(True, which="major", alpha=0.3)
    ax.legend(fontsize="small")
    ax.set_title(f"{values.size} steps; last {min(100, values.size)} steps' mean loss "
                 f"{values[-100:].mean():.4g}", fontsize="small")
    if title:
        fig.suptitle(title)
    return fig


def _log_likelihood_sets(sets) -> tuple[dict, bool]:
    """Named 1-D float arrays of log-likelihoods, and whether any is a bound, from the accepted inputs."""
    if isinstance(sets, dict) and "log_prob" not in sets:
        named = dict(sets)
    else:
        named = {"points": sets}
    out, bound = {}, False
    for name, v in named.items():
        if isinstance(v, dict):
            if "log_prob" not in v:
                raise InputError(f"log-likelihoods {name!r}: a dict must be the output of Model.log_prob (with a "
                                 "'log_prob' entry)", field=str(name))
            bound = bound or bool(v.get("bound", False))
            v = v["log_prob"]
        a = np.asarray(torch.as_tensor(v, dtype=torch.float64).detach().cpu()).reshape(-1)
        if a.size == 0:
            raise InputError(f"log-likelihoods {name!r}: no values", field=str(name))
        bad = ~np.isfinite(a)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"log-likelihoods {name!r}: point {i} has {a[i]}, expected a finite number", row=i,
                             field=str(name))
        out[str(name)] = a
    return out, bound


def plot_log_likelihoods(log_likelihoods, *, bins: int = 50, bound: bool | None = None, size=(800, 450),
                         dpi: int = 100, title: str = ""):
    """A Figure of the distribution of per-point log-likelihoods (nats).

    Parameters
    ----------
    log_likelihoods : values (tensor / array), the dict returned by ``Model.log_prob``, or a dict
        ``{name: either of those}`` to compare sets (e.g. held-out data and uniform points).
    bound : the values are lower bounds (ELBO); default: read from ``Model.log_prob``'s ``bound``.
    bins : histogram bins, shared by the sets.
    """
    sets, is_bound = _log_likelihood_sets(log_likelihoods)
    bound = is_bound if bound is None else bool(bound)
    bins = check_int("bins", bins, minimum=2)
    every = np.concatenate(list(sets.values()))
    lo, hi = np.quantile(every, [0.002, 1.0])
    lo, hi = (lo - 0.5, hi + 0.5) if hi - lo < 1e-9 else (lo, hi)
    fig = new_figure(size, dpi)
    ax = fig.add_subplot()
    for k, (name, a) in enumerate(sets.items()):
        colour = _SET_COLOURS[k % len(_SET_COLOURS)]
        ax.hist(np.clip(a, lo, hi), bins=bins, range=(lo, hi), density=True, histtype="stepfilled", alpha=0.35,
                color=colour, label=f"{name} (n={a.size})")
        ax.axvline(a.mean(), color=colour, lw=1.8, ls="--", label=f"{name}: mean {a.mean():.4g} nats")
    what = "lower bound on the log-likelihood (−ELBO)" if bound else "log-likelihood"
    ax.set_xlabel(f"{what} per point (nats)")
    ax.set_ylabel("density (1/nat)")
    clipped = int((every < lo).sum())
    ax.set_title("per-point log-likelihoods" + (f"; {clipped} points below {lo:.4g} drawn in the first bin"
                                                if clipped else ""), fontsize="small")
    ax.legend(fontsize="small")
    if title:
        fig.suptitle(title)
    return fig

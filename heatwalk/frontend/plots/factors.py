"""Pictures of product spaces: one part of the figure per factor, each the picture its factor declares.

Each factor is drawn in its own ``SubFigure`` by the draw function of its ``plot_kind``, with the
options given for it in ``factor_options`` (a list with one dict per factor). The density of a
product model is joint, so factor pictures show the densities of samples or data, never
``density="model"``.
"""

from __future__ import annotations

from heatwalk.errors import InputError
from heatwalk.frontend.plots.figures import check_model_space, check_options, points, render


def _entries(space):
    from heatwalk.frontend.plots import PLOT_KINDS

    out = []
    for i, f in enumerate(space.factors):
        if f.plot_kind not in PLOT_KINDS:
            raise InputError(f"factor {i} ({f!r}) has no picture (plot_kind {f.plot_kind!r}), so {space!r} "
                             "cannot be drawn factor by factor", field="space")
        out.append(PLOT_KINDS[f.plot_kind])
    return out


def default_size(space) -> tuple[int, int]:
    sizes = [e.default_size(f) for e, f in zip(_entries(space), space.factors)]
    return (min(sum(w for w, _ in sizes), 2800), max(h for _, h in sizes) + 40)


def draw_factors(fig, space, data, samples, *, model=None, factor_options=None) -> None:
    """Draw every factor's picture side by side (module docstring)."""
    check_model_space(model, space)
    entries = _entries(space)
    k = len(space.factors)
    if factor_options is None:
        factor_options = [{}] * k
    if not isinstance(factor_options, (list, tuple)) or len(factor_options) != k or \
            not all(isinstance(o, dict) for o in factor_options):
        raise InputError(f"factor_options: expected a list of {k} dicts (one per factor), got {factor_options!r}",
                         field="factor_options")
    data, samples = points(space, data, "data"), points(space, samples, "samples")
    if data is None and samples is None:
        raise InputError("the product picture draws point sets: give data or samples", field="data")
    widths = [e.default_size(f)[0] for e, f in zip(entries, space.factors)]
    subfigs = fig.subfigures(1, k, width_ratios=widths, squeeze=False)[0]
    for i, (sub, entry, f, opts) in enumerate(zip(subfigs, entries, space.factors, factor_options)):
        check_options(f.plot_kind, entry.draw, opts)
        if opts.get("density") == "model":
            raise InputError(f"factor {i}: density='model' is not available; the model's density is the joint "
                             "law of all factors (use density='samples' or 'data')", field="density")
        entry.draw(sub, f, None if data is None else data[i], None if samples is None else samples[i], **opts)
        sub.suptitle(f"factor {i}: {f!r}", fontsize="medium")


def plot_factors(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "",
                 **options):
    """A Figure with one picture per factor of a product space (module docstring).

    Options: ``factor_options`` (one dict of options per factor). ``size`` in pixels.
    """
    return render("factors", draw_factors, default_size, space, data, samples, model, size, dpi, title, options)

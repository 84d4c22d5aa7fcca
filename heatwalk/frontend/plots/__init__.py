"""Pictures people read: one kind of picture per kind of space, plus the training loss and log-likelihoods.

Which picture a space gets is declared by the space (``space.plot_kind``) and looked up in
``PLOT_KINDS``; :func:`plot` draws it. Every function returns a matplotlib ``Figure`` (built without
pyplot); :func:`save_figure` writes it as PNG, SVG or PDF by the file's extension, atomically.

=================  ==========================================================================
plot_kind          picture (module)
=================  ==========================================================================
``angles``         torus: density heat map with data over it, all pairs for n ≥ 3 (angles)
``coordinates``    R^d: density heat map over the data's window, all pairs for d ≥ 3 (coordinates)
``directions``     S²: equal-area map of the density with data over it (directions)
``rotations``      SO(3): axes coloured by angle, angle histogram vs Haar (rotations)
``compositions``   simplex: ternary diagram (K = 3), log-ratio histograms (compositions)
``sequences``      Categories: per-position symbol frequencies, lengths (sequences)
``factors``        Product: one picture per factor (factors)
=================  ==========================================================================

>>> from heatwalk.frontend.plots import plot, save_figure
>>> fig = plot(model.space, data, samples, model=model, columns=["phi", "psi"])   # doctest: +SKIP
>>> save_figure(fig, "torsions.png")                                              # doctest: +SKIP

A space of your own gets a picture by declaring ``plot_kind`` and, for a new kind, adding a
:class:`~heatwalk.frontend.plots.figures.Picture` to ``PLOT_KINDS``.
"""

from __future__ import annotations

from heatwalk.errors import InputError
from heatwalk.frontend.plots import (
    angles, compositions, coordinates, directions, factors, rotations, sequences,
)
from heatwalk.frontend.plots.angles import plot_angles
from heatwalk.frontend.plots.compositions import plot_compositions
from heatwalk.frontend.plots.coordinates import plot_coordinates
from heatwalk.frontend.plots.diagnostics import plot_log_likelihoods, plot_losses
from heatwalk.frontend.plots.directions import plot_directions
from heatwalk.frontend.plots.factors import plot_factors
from heatwalk.frontend.plots.figures import Picture, new_figure, option_names, render, save_figure
from heatwalk.frontend.plots.rotations import plot_rotations
from heatwalk.frontend.plots.scatter import plot_data_and_samples
from heatwalk.frontend.plots.sequences import plot_sequences

#: plot_kind -> the picture drawn for spaces that declare it
PLOT_KINDS: dict[str, Picture] = {
    "angles": Picture(angles.draw_angles, angles.default_size, angles.OPTIONS, angles.shows_model_density),
    "coordinates": Picture(coordinates.draw_coordinates, coordinates.default_size, coordinates.OPTIONS,
                           coordinates.shows_model_density),
    "directions": Picture(directions.draw_directions, directions.default_size, directions.OPTIONS,
                          directions.shows_model_density),
    "rotations": Picture(rotations.draw_rotations, rotations.default_size, rotations.OPTIONS),
    "compositions": Picture(compositions.draw_compositions, compositions.default_size, compositions.OPTIONS,
                            compositions.shows_model_density),
    "sequences": Picture(sequences.draw_sequences, sequences.default_size, sequences.OPTIONS),
    "factors": Picture(factors.draw_factors, factors.default_size),
}

__all__ = ["PLOT_KINDS", "plot", "picture_for", "picture_options", "save_figure", "new_figure", "plot_angles",
           "plot_directions", "plot_rotations", "plot_compositions", "plot_coordinates", "plot_sequences",
           "plot_factors", "plot_losses", "plot_log_likelihoods", "plot_data_and_samples"]


def picture_for(space) -> Picture:
    """The :class:`Picture` ``space`` declares (``space.plot_kind`` in :data:`PLOT_KINDS`); InputError if none."""
    return _entry(space)


def _entry(space) -> Picture:
    kind = getattr(space, "plot_kind", None)
    if kind is None:
        raise InputError(f"{space!r} has no picture (it declares plot_kind None)", field="space")
    if kind not in PLOT_KINDS:
        raise InputError(f"{space!r} declares plot_kind {kind!r}, which has no picture; known: "
                         f"{sorted(PLOT_KINDS)}", field="space")
    return PLOT_KINDS[kind]


def picture_options(space) -> list[str]:
    """Names of the options the picture of ``space`` takes (keywords of :func:`plot` besides the common ones)."""
    return option_names(_entry(space).draw)


def plot(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "", **options):
    """The picture ``space`` declares (``space.plot_kind``), as a matplotlib Figure.

    Parameters
    ----------
    space : the state space of the points (e.g. ``model.space``).
    data, samples : points on the space (either may be None); drawn, or their densities shown, as
        each picture describes.
    model : a fitted model on ``space``, for pictures that can show its density (``density="model"``).
    size : (width, height) in pixels (default: chosen for the picture); ``dpi`` dots per inch.
    title : the figure's title.
    options : the picture's own options (see :func:`picture_options` and the picture's module);
        an option it does not take is an :class:`InputError`.
    """
    entry = _entry(space)
    return render(space.plot_kind, entry.draw, entry.default_size, space, data, samples, model, size, dpi, title,
                  options)

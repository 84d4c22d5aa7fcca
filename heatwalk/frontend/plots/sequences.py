"""Pictures of sequences (Categories): per-position symbol frequencies and the length distribution.

Top row: heat maps of the frequency of each symbol (rows, named by the space's state names or
alphabet, or the state codes 0 … K-1 without either) at each position (columns, 1-based) for the
data, for the samples, and their difference samples − data. A frequency at position l is taken over
the sequences that reach position l. Bottom: the distribution of sequence lengths, drawn when the
lengths differ (every sequence of a fixed length has the same one: the row is then left out).

Points may be state codes (n, L) on the space, or strings over its alphabet of any lengths (as
records are read from FASTA files). A sequence's length is its number of symbols; with
``pad_symbol`` (a symbol of the alphabet, e.g. "-"), a trailing run of that symbol is padding and is
not counted (nor drawn in the frequencies). Without it every code sequence has length L.

``columns`` (L names, one per position; what ``heatwalk plot`` passes for a table's named-state columns,
e.g. the residue column of a product ``torus:2,categories:1``) labels the positions by name instead of
by number.
"""

from __future__ import annotations

import numpy as np
import torch

from heatwalk.errors import InputError
from heatwalk.frontend.plots.figures import (DATA_COLOUR, SAMPLES_COLOUR, check_model_space, check_names, points,
                                             render)
from heatwalk.spaces.base import Option

FREQUENCY_CMAP, DIFFERENCE_CMAP = "Blues", "RdBu_r"


#: the options the command line offers; no model density: ``heatwalk plot`` draws samples from a model
OPTIONS = (
    Option("pad_symbol", str, "a symbol whose trailing run ends a sequence (padding, not counted in lengths)",
           metavar="SYMBOL"),
)


def default_size(space) -> tuple[int, int]:
    return (min(1500, max(1000, 3 * 14 * space.L + 300)), min(1100, max(620, 18 * space.K + 380)))


def symbols_of(space) -> list[str]:
    if space.state_names is not None:
        return list(space.state_names)
    return list(space.alphabet) if space.alphabet is not None else [str(k) for k in range(space.K)]


def padded_codes(space, x, what: str, pad: int | None) -> np.ndarray:
    """Codes (n, Lmax) with -1 past each sequence's end, from codes on ``space`` or strings over its alphabet."""
    if isinstance(x, (list, tuple)) and x and all(isinstance(s, str) for s in x):
        if space.alphabet is None:
            raise InputError(f"{what}: strings need a space with an alphabet; {space!r} has none", field=what)
        index = {s: k for k, s in enumerate(space.alphabet)}
        out = np.full((len(x), max(len(s) for s in x)), -1, dtype=np.int64)
        for i, s in enumerate(x):
            for j, c in enumerate(s):
                if c not in index:
                    raise InputError(f"{what}: sequence {i + 1}, position {j + 1}: unknown symbol {c!r} (alphabet "
                                     f"{''.join(space.alphabet)!r})", row=i, field=what)
                out[i, j] = index[c]
    else:
        out = points(space, x, what).numpy().astype(np.int64)
    if pad is not None:
        trailing = np.flip(np.logical_and.accumulate(np.flip((out == pad) | (out < 0), 1), 1), 1)
        out = np.where(trailing, -1, out)
    return out


def frequencies(codes: np.ndarray, K: int, length: int) -> np.ndarray:
    """Frequency of each state (rows) at each position (columns) among sequences reaching it: (K, length)."""
    counts = np.zeros((K, length))
    for k in range(K):
        counts[k, : codes.shape[1]] = (codes == k).sum(0)
    reach = counts.sum(0)
    return np.divide(counts, reach, out=np.full_like(counts, np.nan), where=reach > 0)


def draw_sequences(fig, space, data, samples, *, model=None, pad_symbol: str | None = None, columns=None) -> None:
    """Per-position symbol frequencies of data and samples, their difference, and the lengths (module docstring).

    ``model`` is not used: the picture shows point sets (give samples drawn from the model).
    """
    from matplotlib.ticker import MaxNLocator

    check_model_space(model, space)
    names = None if columns is None else check_names(columns, space.L, [], "positions")
    symbols = symbols_of(space)
    pad = None
    if pad_symbol is not None:
        if pad_symbol not in symbols:
            raise InputError(f"pad_symbol {pad_symbol!r} is not a symbol of the alphabet {''.join(symbols)!r}",
                             field="pad_symbol")
        pad = symbols.index(pad_symbol)
    sets = [(name, padded_codes(space, x, name, pad)) for name, x in (("data", data), ("samples", samples))
            if x is not None]
    if not sets:
        raise InputError("the sequences picture draws point sets: give data or samples", field="data")
    length = max(c.shape[1] for _, c in sets)
    freqs = {name: frequencies(c, space.K, length) for name, c in sets}
    panels = [(name, f) for name, f in freqs.items()]
    if len(freqs) == 2:
        panels.append(("samples − data", freqs["samples"] - freqs["data"]))
    lengths = {int(n) for _, c in sets for n in np.unique((c >= 0).sum(1))}
    gs = fig.add_gridspec(2, len(panels), height_ratios=[2.0, 1.0]) if len(lengths) > 1 else \
        fig.add_gridspec(1, len(panels))
    for k, (name, f) in enumerate(panels):
        ax = fig.add_subplot(gs[0, k])
        diff = name.startswith("samples −")
        top = max(float(np.nanmax(np.abs(f))), 1e-3) if diff else 1.0
        im = ax.imshow(f, aspect="auto", interpolation="nearest", cmap=DIFFERENCE_CMAP if diff else FREQUENCY_CMAP,
                       vmin=-top if diff else 0.0, vmax=top, extent=(0.5, length + 0.5, space.K - 0.5, -0.5))
        ax.set_yticks(range(space.K), symbols if space.K <= 40 else None, fontsize="small")
        if names is None:
            ax.xaxis.set_major_locator(MaxNLocator(integer=True, min_n_ticks=1))
            ax.set_xlabel("position")
        else:
            shown = range(0, space.L, max(1, -(-space.L // 20)))  # at most 20 labels
            ax.set_xticks([l + 1 for l in shown], [names[l] for l in shown], rotation=90 if space.L > 4 else 0,
                          fontsize="small")
            ax.set_xlabel("column")
        ax.set_ylabel("state" if space.state_names is not None else "symbol")
        n = next(c.shape[0] for s, c in sets if s == name) if not diff else None
        ax.set_title(f"{name} (n={n})" if n is not None else name, fontsize="small")
        fig.colorbar(im, ax=ax, label="difference in frequency" if diff else "frequency", shrink=0.9)
    if len(lengths) > 1:
        _lengths(fig.add_subplot(gs[1, :]), sets)


def _lengths(ax, sets) -> None:
    """Fractions of sequences of each length, one bar group per length."""
    lengths = {name: (c >= 0).sum(1) for name, c in sets}
    lo = min(int(v.min()) for v in lengths.values())
    hi = max(int(v.max()) for v in lengths.values())
    values = np.arange(lo, hi + 1)
    width = 0.8 / len(sets)
    for k, (name, v) in enumerate(lengths.items()):
        frac = np.bincount(v - lo, minlength=values.size) / v.size
        ax.bar(values + (k - (len(sets) - 1) / 2) * width, frac, width=width, label=f"{name} (n={v.size})",
               color=DATA_COLOUR if name == "data" else SAMPLES_COLOUR, alpha=0.8)
    ax.set_xlabel("sequence length (symbols)")
    ax.set_ylabel("fraction of sequences")
    ax.set_title("sequence lengths", fontsize="small")
    if values.size <= 30:
        ax.set_xticks(values)
    ax.set_xlim(lo - 1, hi + 1)
    ax.legend(fontsize="small")


def plot_sequences(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "",
                   **options):
    """A Figure of per-position symbol frequencies (data, samples, difference) and lengths (module docstring).

    Options: ``pad_symbol`` (a trailing run of it is padding, not counted in lengths), ``columns`` (L names of
    the positions). ``size`` in pixels.
    """
    return render("sequences", draw_sequences, default_size, space, data, samples, model, size, dpi, title,
                  options)

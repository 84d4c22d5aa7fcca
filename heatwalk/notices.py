"""Warnings heatwalk gives while it goes on working (a stale temporary removed, a resume with nothing to resume).

They are ordinary Python warnings of the category :class:`HeatwalkWarning`, so a
library user can filter or record them (``warnings.simplefilter``,
``pytest.warns``). A command-line program calls :func:`one_line_warnings` once:
each heatwalk warning is then printed as one line ``heatwalk: warning: ...`` on
standard error, without Python's file-and-line prefix and source line.
"""

from __future__ import annotations

import sys
import warnings


class HeatwalkWarning(UserWarning):
    """Something worth a line on standard error that does not stop the work."""


def warn(message: str) -> None:
    """Issue ``message`` as a :class:`HeatwalkWarning` (attributed to the caller's caller)."""
    warnings.warn(message, HeatwalkWarning, stacklevel=3)


def one_line_warnings(stream=None) -> None:
    """Print every :class:`HeatwalkWarning` as one line ``heatwalk: warning: MESSAGE`` (other warnings unchanged).

    ``stream`` defaults to standard error at the time of each warning. Every heatwalk warning is shown,
    not only its first occurrence.
    """
    previous = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, HeatwalkWarning):
            text = " ".join(str(message).split())
            print(f"heatwalk: warning: {text}", file=stream or sys.stderr)
        else:
            previous(message, category, filename, lineno, file, line)

    warnings.showwarning = show
    warnings.simplefilter("always", HeatwalkWarning)

"""The one error type heatwalk raises at its public boundaries."""

from __future__ import annotations


class InputError(ValueError):
    """Bad input: says what is wrong, where (row / field), what was expected and what was got.

    Attributes
    ----------
    row : int or None
        0-based index of the first offending row of the batch (or record of a
        file), when the problem belongs to one row.
    field : str or None
        Column, option or argument name the problem belongs to.
    """

    def __init__(self, message: str, *, row: int | None = None, field: str | None = None):
        super().__init__(message)
        self.message = message
        self.row = row
        self.field = field

    def located(self, where: str) -> "InputError":
        """Return a copy whose message is prefixed by a location such as 'data.csv, line 7'."""
        return InputError(f"{where}: {self.message}", row=self.row, field=self.field)

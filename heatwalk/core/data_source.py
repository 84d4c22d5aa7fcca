"""Where a fit's training batches come from: points in memory, rows read on demand, or a stream of batches.

``fit`` accepts three kinds of data (:func:`data_source` picks the reader):

- points in memory (a tensor, a numpy array, a list; a tuple of them for a
  product): validated once, moved to the training device, and indexed there;
- rows read on demand: a numpy memory-mapped array (``np.load(path,
  mmap_mode="r")``, or :func:`heatwalk.io.arrays.open_array` for ``.npy`` and
  uncompressed ``.npz`` files; a tuple of them for a product) or a map-style
  ``torch.utils.data.Dataset``. The whole array is validated once, in chunks of
  ``VALIDATION_CHUNK`` rows, so a bad row is reported with its row number
  before training starts; then each step reads only the rows of its batch (in
  increasing order, once each) and converts them to points. Memory use does
  not grow with the number of rows: the process holds a chunk and a batch.
- an iterable of batches (a ``torch.utils.data.DataLoader``, an
  ``IterableDataset``, any re-iterable object): each item is one global batch,
  validated when it arrives; iteration restarts when it runs out (a one-shot
  iterator that runs out is an error). Randomness of the batch order is the
  iterable's own: give a DataLoader a seeded ``generator`` for reproducible
  runs, and the same iterable to every process of a data-parallel run (each
  rank reads the whole global batch and evaluates its slice). Resuming skips
  the batches already used by iterating over them.

Row sources draw their batch indices from the run's generator exactly as the
in-memory path does, so a memory-mapped array trains to the same weights, bit
for bit, as the same array loaded into memory.
"""

from __future__ import annotations

import re

import numpy as np
import torch

from heatwalk.errors import InputError
from heatwalk.spaces.product import Product

#: rows validated at a time when a row source is checked before training
VALIDATION_CHUNK = 1 << 16


def _is_memmap(x) -> bool:
    return isinstance(x, np.memmap) or (isinstance(x, (tuple, list)) and any(isinstance(v, np.memmap) for v in x))


def _is_map_dataset(x) -> bool:
    data = torch.utils.data
    return isinstance(x, data.Dataset) and not isinstance(x, data.IterableDataset) and hasattr(x, "__len__")


def _is_stream(x) -> bool:
    if isinstance(x, (torch.Tensor, np.ndarray, list, tuple, str, bytes, dict)):
        return False
    if type(x).__module__.startswith(("pandas", "scipy.spatial")):  # tables and rotations in memory
        return False
    return hasattr(x, "__iter__")


def data_source(space, data, device: torch.device):
    """The reader of ``data`` for ``fit`` (module docstring): :class:`InMemory`, :class:`RowReader` or
    :class:`BatchStream`."""
    if _is_memmap(data) or _is_map_dataset(data):
        return RowReader(space, data, device)
    if _is_stream(data):
        return BatchStream(space, data, device)
    return InMemory(space, data, device)


def _move(x, device):
    return tuple(v.to(device) for v in x) if isinstance(x, tuple) else x.to(device)


def _shift_rows(e: InputError, offset: int, where: str) -> InputError:
    """The error ``e`` about row i of a chunk, restated about row offset + i of the whole data."""
    if e.row is None:
        return InputError(f"{where}: {e.message}", field=e.field)
    message = re.sub(rf"\brow {e.row}\b", f"row {offset + e.row}", e.message, count=1)
    return InputError(f"{where}: {message}", row=offset + e.row, field=e.field)


class InMemory:
    """Points held in memory on the training device, indexed by each batch's row indices."""

    streams = False

    def __init__(self, space, data, device):
        self.space = space
        x = space.validate(data)
        self.n = space.n_points(x)
        self.x = _move(x, device)

    def batch(self, idx: torch.Tensor):
        return self.space.take(self.x, idx)


class RowReader:
    """Rows of a memory-mapped array (or a tuple of them, one per factor) or of a map-style Dataset, read per batch."""

    streams = False

    def __init__(self, space, data, device):
        self.space, self.data, self.device = space, data, device
        self.dataset = _is_map_dataset(data)
        self.product = isinstance(space, Product)
        if self.dataset:
            self.n = len(data)
        else:
            parts = data if isinstance(data, (tuple, list)) else (data,)
            sizes = {int(np.shape(p)[0]) for p in parts}
            if len(sizes) != 1:
                raise InputError(f"data: the factors' arrays have different numbers of rows {sorted(sizes)}",
                                 field="data")
            self.n = sizes.pop()
            self._check_all()

    def _read(self, rows: np.ndarray):
        """Points of the given sorted unique row numbers (unvalidated tensors, on the CPU)."""
        if self.dataset:
            return self._items(rows)
        if isinstance(self.data, (tuple, list)):
            # cpu: rows are read on the CPU and moved to the device as a batch
            return tuple(torch.as_tensor(np.asarray(p[rows])) for p in self.data)
        # cpu: rows are read on the CPU and moved to the device as a batch
        return torch.as_tensor(np.asarray(self.data[rows]))

    def _items(self, rows):
        items = [self.data[int(i)] for i in rows]
        if not self.product:
            items = [it[0] if isinstance(it, (tuple, list)) and len(it) == 1 else it for it in items]
            # cpu: rows are read on the CPU and moved to the device as a batch
            return torch.stack([torch.as_tensor(np.asarray(it)) for it in items])
        # cpu: as above
        return tuple(torch.stack([torch.as_tensor(np.asarray(it[f])) for it in items])
                     for f in range(len(self.space.factors)))

    def _check_all(self) -> None:
        """Validate every row, VALIDATION_CHUNK rows at a time (errors name the row of the whole array)."""
        for a in range(0, self.n, VALIDATION_CHUNK):
            rows = np.arange(a, min(a + VALIDATION_CHUNK, self.n))
            try:
                self.space.validate(self._read(rows))
            except InputError as e:
                raise _shift_rows(e, a, "data") from None

    def batch(self, idx: torch.Tensor):
        order = idx.cpu().numpy()
        rows, inverse = np.unique(order, return_inverse=True)
        try:
            x = self.space.validate(self._read(rows))
        except InputError as e:
            if e.row is None:
                raise
            item = int(rows[e.row])
            raise InputError(f"data item {item}: {e.message}", row=item, field=e.field) from None
        # cpu: the batch is put in order on the CPU, then moved
        inverse = torch.as_tensor(inverse)
        return _move(self.space.take(x, inverse), self.device)


class BatchStream:
    """An iterable of global batches, cycled; each batch validated and moved to the device as it arrives."""

    streams = True
    n = None

    def __init__(self, space, data, device):
        self.space, self.data, self.device = space, data, device
        self.product = isinstance(space, Product)
        self._it = iter(data)
        self._one_shot = self._it is data
        self.count = 0

    def _raw_next(self):
        try:
            return next(self._it)
        except StopIteration:
            if self._one_shot or self.count == 0:
                raise InputError(f"data: the iterable of batches ran out after {self.count} batches; give a "
                                 "re-iterable one (e.g. a DataLoader) or fewer steps", field="data") from None
            self._it = iter(self.data)
            return self._raw_next()

    def skip(self, k: int) -> None:
        """Pass over k batches (resuming a run)."""
        for _ in range(k):
            self._raw_next()
            self.count += 1

    def next(self):
        item = self._raw_next()
        self.count += 1
        if not self.product and isinstance(item, (tuple, list)) and len(item) == 1:
            item = item[0]
        try:
            x = self.space.validate(item)
        except InputError as e:
            raise InputError(f"data batch {self.count}: {e.message}", row=e.row, field=e.field) from None
        return _move(x, self.device)

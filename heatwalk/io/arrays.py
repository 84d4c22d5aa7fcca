"""Numeric arrays on disk (``.npy``, ``.npz``) opened without reading them: memory-mapped.

:func:`open_array` returns a read-only ``numpy.memmap`` of a ``.npy`` file, or of
one member of an *uncompressed* ``.npz`` archive (``numpy.savez``; the member is
stored as a plain ``.npy`` inside the zip file, so it can be mapped at its
offset). ``heatwalk.fit`` reads such an array batch by batch
(:mod:`heatwalk.core.data_source`), so a file larger than memory trains with a
memory use that does not depend on its size. Compressed archives
(``numpy.savez_compressed``) cannot be mapped and are refused with that reason.

``MEMMAP_MIN_BYTES`` is the size from which the command line maps a file
instead of loading it (smaller files are loaded: mapping gains nothing there).
"""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np

from heatwalk.errors import InputError

#: files at least this large (bytes) are memory-mapped by the command line rather than loaded (256 MiB)
MEMMAP_MIN_BYTES = 256 * 2**20


def open_array(path, member: str | None = None) -> np.memmap:
    """A read-only memory map of the array in ``path`` (``.npy``, or member ``member`` of an uncompressed ``.npz``).

    ``member`` defaults to the archive's only array. Raises :class:`InputError` for a missing file, another
    suffix, a compressed archive, an unknown member, or an array of objects.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file", field="data")
    suffix = path.suffix.lower()
    if suffix == ".npy":
        if member is not None:
            raise InputError(f"{path}: a .npy file holds one array; member {member!r} applies to .npz archives",
                             field="member")
        return _map_npy(path, 0)
    if suffix == ".npz":
        return _map_npz_member(path, member)
    raise InputError(f"{path}: expected a .npy or .npz file, got {suffix or 'no suffix'!r}", field="data")


def _map_npy(path: Path, offset: int) -> np.memmap:
    """Map the .npy array whose header starts ``offset`` bytes into ``path``."""
    with open(path, "rb") as f:
        f.seek(offset)
        try:
            version = np.lib.format.read_magic(f)
            read = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
            shape, fortran, dtype = read(f)
        except ValueError as e:
            raise InputError(f"{path}: not a numpy array file ({e})", field="data") from None
        start = f.tell()
    if dtype.hasobject:
        raise InputError(f"{path}: holds Python objects, not numbers", field="data")
    return np.memmap(path, dtype=dtype, mode="r", shape=shape, order="F" if fortran else "C", offset=start)


def _map_npz_member(path: Path, member: str | None) -> np.memmap:
    try:
        archive = zipfile.ZipFile(path)
    except zipfile.BadZipFile as e:
        raise InputError(f"{path}: not a .npz archive ({e})", field="data") from None
    with archive:
        names = [i.filename for i in archive.infolist() if i.filename.endswith(".npy")]
        if member is None:
            if len(names) != 1:
                raise InputError(f"{path}: holds {len(names)} arrays {[n[:-4] for n in names]}; name the one to use",
                                 field="member")
            info = archive.getinfo(names[0])
        else:
            if member + ".npy" not in names:
                raise InputError(f"{path}: no array {member!r}; it holds {[n[:-4] for n in names]}", field="member")
            info = archive.getinfo(member + ".npy")
        if info.compress_type != zipfile.ZIP_STORED:
            raise InputError(f"{path}: array {info.filename[:-4]!r} is compressed (numpy.savez_compressed) and cannot "
                             "be memory-mapped; save it with numpy.savez or numpy.save", field="data")
        with open(path, "rb") as f:  # the member's data starts after its local header (name and extra field)
            f.seek(info.header_offset + 26)
            name_len, extra_len = np.frombuffer(f.read(4), dtype="<u2")
        offset = info.header_offset + 30 + int(name_len) + int(extra_len)
    return _map_npy(path, offset)

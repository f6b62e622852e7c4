"""Reading and writing tables.

Public API
----------
read_table
    One table file (n,k or eps1,eps2 against wavelength, energy, wavenumber or frequency)
    -> :class:`kkcheck.spectrum.Dataset` on the canonical photon-energy axis.
write_table_csv
    A Dataset, Spectrum or DataFrame -> CSV with unit-bearing headers and a provenance
    comment block, readable again by :func:`read_table`.
write_json
    Any JSON-like value (numpy types converted, NaN -> null) -> a JSON file.
write_text
    Any text -> a file (for other plain-text outputs), with the same guarantees.
sha256_file
    Hex sha256 digest of a file.

Both writers replace the target atomically and refuse to write over any of the run's input
files. Header spellings live in one table, :mod:`kkcheck.io.headers`.

The reader is split by what each part reads: :mod:`~kkcheck.io.text` (bytes -> lines),
:mod:`~kkcheck.io.layout` (delimiter, header -> column roles), :mod:`~kkcheck.io.cells`
(cells -> numbers), :mod:`~kkcheck.io.values` (numbers -> energy and eps, checks, duplicates)
and :mod:`~kkcheck.io.read` (:func:`read_table`, the sequence of those steps).
"""

from .read import read_table
from .write import sha256_file, write_json, write_table_csv, write_text

__all__ = ["read_table", "write_table_csv", "write_json", "write_text", "sha256_file"]

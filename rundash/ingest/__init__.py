"""Ingest: one reader per open format, the machine description file, and the importer.

``open_reader(path, data)`` picks the reader by ``[data].format`` or the file ending.
"""

from __future__ import annotations

from pathlib import Path

from rundash.errors import InputError, invalid_value
from rundash.ingest.base import Reader
from rundash.model import DataSpec

FORMAT_BY_SUFFIX = {".csv": "csv", ".txt": "csv", ".wav": "wav", ".h5": "hdf5", ".hdf5": "hdf5",
                    ".hdf": "hdf5", ".parquet": "parquet", ".pq": "parquet", ".mf4": "mdf",
                    ".mdf": "mdf"}


def reader_class(fmt: str) -> type[Reader]:
    if fmt == "csv":
        from rundash.ingest.csv_reader import CsvReader
        return CsvReader
    if fmt == "wav":
        from rundash.ingest.wav_reader import WavReader
        return WavReader
    if fmt == "hdf5":
        from rundash.ingest.hdf5_reader import Hdf5Reader
        return Hdf5Reader
    if fmt == "parquet":
        from rundash.ingest.parquet_reader import ParquetReader
        return ParquetReader
    if fmt == "mdf":
        from rundash.ingest.mdf_reader import MdfReader
        return MdfReader
    raise InputError(invalid_value("format", fmt, "'csv', 'wav', 'hdf5', 'parquet' or 'mdf'"))


def open_reader(path: str | Path, data: DataSpec | None = None) -> Reader:
    """Open a data file with the reader its format calls for."""
    data = data or DataSpec()
    path = Path(path)
    fmt = data.format
    if fmt == "auto":
        fmt = FORMAT_BY_SUFFIX.get(path.suffix.lower())
        if fmt is None:
            raise InputError(f"{path.name}: cannot tell the format from the ending "
                             f"{path.suffix!r}; expected one of {', '.join(sorted(FORMAT_BY_SUFFIX))} "
                             "or set [data].format")
    return reader_class(fmt)(path, data)

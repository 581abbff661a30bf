"""icgen snapshot files (HDF5; the format: docs/snapshot-format.md).

Modules, lowest first: ``schema`` (names, layout, units both ways, size estimate),
``diskfile`` and ``writer`` (streamed, atomic writing), ``validate`` (header and value
checks), ``reader`` (the one reader), ``describe`` (``icgen info``).
"""
from ..paths import OutputWriteError, partial_path
from .describe import describe
from .reader import (SLAB_ROWS, Snapshot, SnapshotFile, load_model_from_snapshot,
                     open_snapshot, read_header, read_rows, read_snapshot)
from .schema import (COMPRESSIONS, PRECISIONS, READABLE_VERSIONS, SCHEMA, SCHEMA_VERSION,
                     SPEED_OF_LIGHT, FileUnits, check_format, check_output_units,
                     estimate_file_size, gravitational_constant)
from .validate import check_values
from .writer import NonFiniteError, SnapshotWriter, create_datasets, write_chunk

__all__ = ["SCHEMA", "SCHEMA_VERSION", "READABLE_VERSIONS", "PRECISIONS", "COMPRESSIONS",
           "SPEED_OF_LIGHT", "FileUnits", "gravitational_constant", "check_format",
           "check_output_units", "estimate_file_size", "NonFiniteError", "OutputWriteError",
           "SnapshotWriter", "create_datasets", "write_chunk", "partial_path", "SLAB_ROWS",
           "Snapshot", "SnapshotFile", "open_snapshot", "read_header", "read_rows",
           "read_snapshot", "load_model_from_snapshot", "check_values", "describe"]

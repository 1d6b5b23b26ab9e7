"""Arrow schemas of the four output tables, and atomic Parquet part files.

The schemas are explicit so that every part file of a dataset agrees, even a part whose
chunk happened to have only nulls in a column (pyarrow would otherwise guess ``null``).
"""

from __future__ import annotations

import os

import pyarrow as pa
import pyarrow.parquet as pq

from libconf.pipeline.columns import (  # noqa: F401  (re-exported)
    ERROR_COLUMNS,
    KEY_COLUMNS,
    MOLECULE_COLUMNS,
    RING_COLUMNS,
    SUBSTITUENT_COLUMNS,
    TABLE_COLUMNS,
    TABLES,
    TableBuffer,
)
from libconf.pipeline.failures import FatalError

_KEY_TYPES = {"mol_id": pa.string(), "input_file": pa.string(), "input_row": pa.int64()}
_KEY = [pa.field(n, _KEY_TYPES[n], nullable=False) for n in KEY_COLUMNS]

_STR, _F64, _I32, _BOOL = pa.string(), pa.float64(), pa.int32(), pa.bool_()

#: Arrow type of every result column the engine can emit.
COLUMN_TYPES: dict[str, pa.DataType] = {
    # molecules
    "smiles": _STR,
    "n_heavy_atoms": _I32,
    "n_sat6_rings": _I32,
    "n_locked_rings": _I32,
    "locked_scaffold": _BOOL,
    "max_dG_flip_kjmol": _F64,
    "min_dG_flip_kjmol": _F64,
    "max_barrier_kjmol": _F64,
    "min_barrier_kjmol": _F64,
    "axial_strain_kjmol": _F64,
    "n_axial_major": _F64,
    "n_stereo_undefined_rings": _I32,
    # rings
    "ring_id": _I32,
    "ring_atoms": pa.list_(pa.int32()),
    "ring_class": _STR,
    "topology": _STR,
    "fusion": _STR,
    "n_planar_ring_atoms": _I32,
    "stereo_status": _STR,
    "dG_flip_kjmol": _F64,
    "dG_flip_min_kjmol": _F64,
    "dG_flip_max_kjmol": _F64,
    "major_chair_fraction": _F64,
    "twist_boat_fraction": _F64,
    "barrier_kjmol": _F64,
    "flip_rate_per_s": _F64,
    "flip_half_life_s": _F64,
    "lock_class": _STR,
    "lock_reason": _STR,
    "value_source": _STR,
    "uncertainty_kjmol": _F64,
    # substituents
    "ring_atom": _I32,
    "position": _I32,
    "first_atom": _I32,
    "group": _STR,
    "face": _STR,
    "axial_fraction": _F64,
    "a_value_kjmol": _F64,
    "a_value_source": _STR,
    # errors
    "reason": _STR,
    "raw": _STR,
    "stage": _STR,
}



def _schema(columns: tuple[str, ...]) -> pa.Schema:
    missing = [c for c in columns if c not in COLUMN_TYPES]
    if missing:
        # The engine grew a column: give it a type here (caught by the tests).
        raise RuntimeError(f"no Arrow type declared for result column(s) {missing}")
    return pa.schema(_KEY + [pa.field(c, COLUMN_TYPES[c]) for c in columns])


SCHEMAS: dict[str, pa.Schema] = {
    "molecules": _schema(MOLECULE_COLUMNS),
    "rings": _schema(RING_COLUMNS),
    "substituents": _schema(SUBSTITUENT_COLUMNS),
    "errors": _schema(ERROR_COLUMNS),
}


def columns_to_arrow(name: str, columns: dict[str, list]) -> pa.Table:
    """A table's column lists (as `TableBuffer` holds them) as a pyarrow.Table."""
    schema = SCHEMAS[name]
    arrays = [pa.array(columns[f.name], type=f.type) for f in schema]
    return pa.Table.from_arrays(arrays, schema=schema)


def part_name(chunk: int) -> str:
    return f"part-{chunk:06d}.parquet"


def write_part(out_dir: str, table_name: str, chunk: int, table: pa.Table) -> None:
    """Write one part file so that it exists whole or not at all."""
    folder = os.path.join(out_dir, table_name)
    final = os.path.join(folder, part_name(chunk))
    # A leading dot keeps readers of the dataset from picking up a half-written file.
    tmp = os.path.join(folder, "." + part_name(chunk) + ".tmp")
    try:
        with open(tmp, "wb") as fh:
            pq.write_table(table, fh, compression="zstd")
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, final)
    except OSError as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise FatalError(
            f"cannot write {final}: {exc.strerror or exc}; free some space (or choose "
            "another --out) and continue with --resume"
        ) from exc


def fsync_dir(path: str) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)

"""``annotate_frame``: a pandas DataFrame of SMILES in, the molecules table out.

For engines that bring their own parallelism (Dask ``map_partitions``, Spark
``mapInPandas``): it runs in the calling process, one row out per row in, same index,
so a partition keeps its length and order. Rows that cannot be analysed keep their
place, with the molecule columns null and ``error`` / ``error_stage`` saying why.

The output has one fixed schema whatever the partition holds (all valid, all invalid,
or no rows at all): :func:`frame_meta` is an empty frame of it (Dask's ``meta=``),
:func:`frame_schema` the same as an Arrow schema and :func:`frame_ddl` as a DDL string
(Spark's ``mapInPandas`` schema). Strings are ``string[pyarrow]``, counts ``Int32``,
flags ``boolean`` (nullable, so an error row keeps the dtype), energies ``float64``.
"""

from __future__ import annotations

from collections.abc import Callable

import pandas as pd
import pyarrow as pa

from libconf.pipeline.failures import UsageError
from libconf.pipeline.readers import Record, truncate_raw
from libconf.pipeline.run import DEFAULTS, MEDIA
from libconf.pipeline.tables import MOLECULE_COLUMNS, SCHEMAS
from libconf.pipeline.work import AnalysisOptions, analyse_chunk

FRAME_COLUMNS = ("mol_id", *MOLECULE_COLUMNS, "error", "error_stage")

_STRING = pd.StringDtype("pyarrow")  # what Dask turns object columns into anyway
_PANDAS_TYPE = {"string": _STRING, "int32": "Int32", "bool": "boolean", "double": "float64"}
_DDL_TYPE = {"string": "string", "int32": "int", "bool": "boolean", "double": "double"}


def frame_schema() -> pa.Schema:
    """Arrow schema of what :func:`annotate_frame` returns (every column nullable)."""
    molecules = SCHEMAS["molecules"]
    fields = [pa.field("mol_id", pa.string())]
    fields += [pa.field(name, molecules.field(name).type) for name in MOLECULE_COLUMNS]
    fields += [pa.field("error", pa.string()), pa.field("error_stage", pa.string())]
    return pa.schema(fields)


def frame_dtypes() -> dict[str, object]:
    """Column name -> pandas dtype of what :func:`annotate_frame` returns."""
    return {f.name: _PANDAS_TYPE[str(f.type)] for f in frame_schema()}


def frame_meta() -> pd.DataFrame:
    """An empty frame with the output's columns and dtypes (``meta=`` for Dask).

    >>> list(frame_meta().columns[:3])
    ['mol_id', 'smiles', 'n_heavy_atoms']
    """
    return _typed(pd.DataFrame({name: [] for name in FRAME_COLUMNS}))


def frame_ddl() -> str:
    """The output schema as a DDL string, e.g. for Spark's ``mapInPandas(schema=...)``."""
    return ", ".join(f"{f.name} {_DDL_TYPE[str(f.type)]}" for f in frame_schema())


def annotate_frame(
    df: pd.DataFrame,
    smiles_column: str = "smiles",
    *,
    id_column: str | None = None,
    temperature: float = DEFAULTS["temperature"],
    medium: str = DEFAULTS["medium"],
    record_timeout: float | None = DEFAULTS["record_timeout"],
    max_heavy_atoms: int = DEFAULTS["max_heavy_atoms"],
    max_stereo_assignments: int = DEFAULTS["max_stereo_assignments"],
    analyzer: Callable | None = None,
) -> pd.DataFrame:
    """The molecules-table columns for each row of ``df`` (same index, same order).

    >>> annotate_frame(pd.DataFrame({"smiles": ["CC1CCCCC1"]}))["n_sat6_rings"].tolist()
    [1]
    """
    if smiles_column not in df.columns:
        raise UsageError(f"no column {smiles_column!r} in the frame; its columns are {list(df.columns)}")
    if id_column is not None and id_column not in df.columns:
        raise UsageError(f"no column {id_column!r} in the frame")
    if medium not in MEDIA:
        raise UsageError(f"medium must be one of {', '.join(MEDIA)} (got {medium!r})")
    options = AnalysisOptions(
        temperature=float(temperature),
        medium=medium,
        max_heavy_atoms=int(max_heavy_atoms),
        max_stereo_assignments=int(max_stereo_assignments),
        record_timeout=record_timeout or None,
    )
    ids = df[id_column] if id_column is not None else pd.Series(range(len(df)), index=df.index)
    records = []
    for row, (smi, ident) in enumerate(zip(df[smiles_column], ids, strict=True)):
        mol_id = str(ident)
        if not isinstance(smi, str) or not smi.strip():
            records.append(
                Record(
                    "", row, mol_id, "error", "", truncate_raw(str(smi)), "no SMILES (empty or null)", "read"
                )
            )
        else:
            records.append(Record("", row, mol_id, "smiles", smi.strip(), truncate_raw(smi)))
    result = analyse_chunk(0, records, options, analyzer)
    mols = result.tables["molecules"].to_pandas()
    errs = result.tables["errors"].to_pandas()
    out = pd.DataFrame(index=pd.RangeIndex(len(df)), columns=list(FRAME_COLUMNS))
    out = out.astype({"mol_id": object, "error": object, "error_stage": object})
    if len(mols):
        out.loc[mols.input_row.to_numpy(), list(MOLECULE_COLUMNS)] = mols[list(MOLECULE_COLUMNS)].to_numpy()
    if len(errs):
        rows = errs.input_row.to_numpy()
        out.loc[rows, "error"] = errs.reason.to_numpy()
        out.loc[rows, "error_stage"] = errs.stage.to_numpy()
    out["mol_id"] = [r.mol_id for r in records]
    out = _typed(out)
    out.index = df.index
    return out


def _typed(out: pd.DataFrame) -> pd.DataFrame:
    """Cast every column to its fixed dtype (nullable ints and flags stay typed with gaps)."""
    for name, dtype in frame_dtypes().items():
        if dtype == "float64":
            out[name] = pd.to_numeric(out[name], errors="coerce").astype("float64")
        elif dtype is _STRING:
            out[name] = out[name].astype(object).where(out[name].notna(), None).astype(_STRING)
        else:
            out[name] = out[name].astype(dtype)
    return out

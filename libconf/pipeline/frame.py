"""``annotate_frame``: a pandas DataFrame of SMILES in, the molecules table out.

For engines that bring their own parallelism (Dask ``map_partitions``, Spark
``mapInPandas``): it runs in the calling process, one row out per row in, same index,
so a partition keeps its length and order. Rows that cannot be analysed keep their
place, with the molecule columns null and ``error`` / ``error_stage`` saying why.
"""

from __future__ import annotations

from collections.abc import Callable

import pandas as pd

from libconf.pipeline.failures import UsageError
from libconf.pipeline.readers import Record, truncate_raw
from libconf.pipeline.run import DEFAULTS, MEDIA
from libconf.pipeline.tables import MOLECULE_COLUMNS, SCHEMAS
from libconf.pipeline.work import AnalysisOptions, analyse_chunk

FRAME_COLUMNS = ("mol_id", *MOLECULE_COLUMNS, "error", "error_stage")


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
    """Nullable pandas dtypes matching the Parquet schema (ints stay ints with gaps)."""
    schema = SCHEMAS["molecules"]
    for name in MOLECULE_COLUMNS:
        t = schema.field(name).type
        if str(t) == "int32":
            out[name] = out[name].astype("Int32")
        elif str(t) == "bool":
            out[name] = out[name].astype("boolean")
        elif str(t) == "double":
            out[name] = pd.to_numeric(out[name], errors="coerce").astype("float64")
        else:
            out[name] = out[name].astype(object)
    return out

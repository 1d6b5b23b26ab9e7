"""annotate_frame: one row out per row in, same index, errors kept in place."""

from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd
import pytest

from libconf.pipeline.failures import UsageError
from libconf.pipeline.frame import annotate_frame
from libconf.pipeline.run import annotate

DATA = Path(__file__).parent / "data" / "pipeline"
sys.path.insert(0, str(DATA))
import paced_engine  # noqa: E402


def test_rows_keep_index_and_order_and_bad_rows_carry_a_reason():
    df = pd.DataFrame(
        {
            "smiles": ["CC1CCCCC1", None, "C1CC(C", "c1ccccc1", "O[C@H]1CC[C@H](C(C)(C)C)CC1"],
            "vendor_id": ["QR-F1", "QR-F2", "QR-F3", "QR-F4", "QR-F5"],
        },
        index=[40, 41, 42, 43, 44],
    )
    out = annotate_frame(df, id_column="vendor_id")
    assert list(out.index) == [40, 41, 42, 43, 44]
    assert list(out.mol_id) == list(df.vendor_id)
    assert out.error.isna().tolist() == [True, False, False, True, True]
    assert list(out.error_stage.dropna()) == ["read", "parse"]
    assert out.loc[43, "n_sat6_rings"] == 0 and out.loc[40, "n_sat6_rings"] == 1
    assert bool(out.loc[44, "locked_scaffold"]) is True  # 4-tert-butyl holds the chair


def test_frame_values_equal_the_batch_tables(tmp_path):
    smiles = ["C[C@H]1CC[C@@H](C(C)(C)C)CC1", "O[C@@H]1CCCC[C@H]1N", "C1COCCN1C(=O)c1ccccc1"]
    src = tmp_path / "three.smi"
    src.write_text("".join(f"{s} m{k}\n" for k, s in enumerate(smiles)))
    annotate([src], tmp_path / "run", jobs=1)
    batch = pd.read_parquet(tmp_path / "run" / "molecules")
    frame = annotate_frame(pd.DataFrame({"smiles": smiles}))
    for col in ("n_sat6_rings", "n_locked_rings", "max_dG_flip_kjmol", "axial_strain_kjmol"):
        assert frame[col].astype(float).tolist() == batch[col].astype(float).tolist(), col


def test_time_guard_applies_in_the_calling_process():
    df = pd.DataFrame({"smiles": ["C1CCCCC1", paced_engine.SLOW_SMILES]})
    out = annotate_frame(df, record_timeout=0.3, analyzer=paced_engine.slow_on_marked)
    assert out.error.isna().tolist() == [True, False]
    assert "longer than 0.3 s" in out.error.iloc[1]


def test_missing_column_is_a_usage_error():
    with pytest.raises(UsageError, match="no column 'smiles'"):
        annotate_frame(pd.DataFrame({"SMILES_X": ["C"]}))

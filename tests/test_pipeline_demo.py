"""The bundled demo library: regenerates byte for byte, and runs clean through annotate."""

from __future__ import annotations

import gzip
import subprocess
import sys
from pathlib import Path

import pandas as pd

from libconf.pipeline.readers import Record
from libconf.pipeline.run import _Executor
from libconf.pipeline.work import AnalysisOptions

ROOT = Path(__file__).resolve().parents[1]
DEMO_DIR = ROOT / "datasets" / "demo"
DEMO = DEMO_DIR / "quillan_ridge_library.smi.gz"


def test_generator_reproduces_the_committed_file(tmp_path):
    again = tmp_path / "again.smi.gz"
    subprocess.run(
        [sys.executable, str(DEMO_DIR / "make_demo.py"), "-o", str(again)], check=True, capture_output=True
    )
    # Depends on RDKit's SMILES writer: after an RDKit upgrade, regenerate and commit.
    assert again.read_bytes() == DEMO.read_bytes(), "run datasets/demo/make_demo.py and commit"
    assert DEMO.stat().st_size < 1_000_000


def test_demo_run_accounts_for_every_record(tmp_path):
    from libconf.pipeline.run import annotate

    with gzip.open(DEMO, "rt") as fh:
        records = [line.split()[1] for line in fh if line.strip() and not line.startswith("#")]
    summary = annotate([DEMO], tmp_path / "run", jobs=2)
    assert summary["records"] == len(records) == 3007
    mols = pd.read_parquet(tmp_path / "run" / "molecules")
    errs = pd.read_parquet(tmp_path / "run" / "errors")
    # Exactly the deliberately broken records fail, and each says why.
    assert sorted(errs.mol_id) == [f"QRCL-X{k:04d}" for k in range(1, 8)]
    assert errs.reason.str.len().min() > 10
    assert list(pd.concat([mols, errs]).sort_values("input_row").mol_id) == records
    assert (mols.n_sat6_rings > 0).all()  # every good demo record has a ring to describe


def test_chunks_in_flight_stay_bounded_whatever_the_input_length():
    pulled = []

    def chunks():
        for k in range(40):
            pulled.append(k)
            yield k, [Record("x.smi", k, f"x:{k}", "smiles", "C1CCCCC1", "C1CCCCC1")]

    ex = _Executor(2, AnalysisOptions(298.15, "water", 500, 64, None), None)
    most_ahead = 0
    for n_done, result in enumerate(ex.map(chunks()), start=1):
        assert result.chunk == n_done - 1  # in input order
        most_ahead = max(most_ahead, len(pulled) - n_done)
    assert len(pulled) == 40 and most_ahead <= ex.window

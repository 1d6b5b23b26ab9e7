"""annotate and annotate_frame on a real Dask cluster (two worker processes on this machine).

The cluster's tables must equal a local run's, byte for byte once read back, and the
guards (time limit, crash isolation, resume) must behave as they do locally.
"""

from __future__ import annotations

import gzip
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

distributed = pytest.importorskip("distributed")
dd = pytest.importorskip("dask.dataframe")
import cloudpickle  # noqa: E402  (a dependency of dask)
import dask  # noqa: E402

from libconf.pipeline.failures import FatalError, UsageError  # noqa: E402
from libconf.pipeline.frame import annotate_frame, frame_meta  # noqa: E402
from libconf.pipeline.run import annotate  # noqa: E402
from libconf.pipeline.tables import TABLES  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data" / "pipeline"
CURATED = [DATA / n for n in ("mixed.smi", "quoted.csv", "library.tsv", "broken.sdf")]
sys.path.insert(0, str(DATA))
import paced_engine  # noqa: E402

# The workers cannot import the test helpers, so they travel with the task.
cloudpickle.register_pickle_by_value(paced_engine)
cloudpickle.register_pickle_by_value(sys.modules[__name__])


def busy_on_marked(target, **options):
    """Spins in Python on the marked record, as a slow pure-Python step would."""
    if target == paced_engine.SLOW_SMILES:
        end = time.monotonic() + 60
        while time.monotonic() < end:
            pass
    return paced_engine.real_analyze(target, **options)


@pytest.fixture(scope="module")
def client():
    # allowed-failures 0: a task that kills one worker is given up at once (KilledWorker),
    # so the crash test does not wait for three more worker restarts.
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        with distributed.LocalCluster(
            n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None
        ) as cluster:
            with distributed.Client(cluster) as c:
                yield c


def tables(out: Path) -> dict[str, pd.DataFrame]:
    return {t: pd.read_parquet(out / t) for t in TABLES}


def assert_same_tables(a: Path, b: Path) -> None:
    ta, tb = tables(a), tables(b)
    for t in TABLES:
        pd.testing.assert_frame_equal(ta[t], tb[t], check_exact=True, obj=t)


def manifest(out: Path) -> dict:
    return json.loads((out / "manifest.json").read_text())


def test_cluster_run_writes_the_same_tables_as_a_local_run(client, tmp_path):
    local = annotate(CURATED, tmp_path / "local", jobs=1, chunk_size=3)
    remote = annotate(CURATED, tmp_path / "cluster", chunk_size=3, scheduler=client.scheduler.address)
    assert_same_tables(tmp_path / "local", tmp_path / "cluster")
    for k in ("records", "molecules", "errors", "rings", "substituents", "chunks"):
        assert remote[k] == local[k], k
    m = manifest(tmp_path / "cluster")
    assert m["status"] == "finished" and m["scheduler"] == client.scheduler.address
    assert m["jobs"] == 2  # the cluster's worker threads
    assert m["counts"] == manifest(tmp_path / "local")["counts"]
    # every input record is accounted for once (the contract's invariant)
    t = tables(tmp_path / "cluster")
    assert len(t["molecules"]) + len(t["errors"]) == 8 + 6 + 3 + 6


def test_cli_scheduler_option_runs_on_the_cluster(client, tmp_path):
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    args = [sys.executable, "-m", "libconf.pipeline.cli", "annotate", str(CURATED[0]), "--quiet"]
    res = subprocess.run(
        [*args, "--out", str(tmp_path / "c"), "--scheduler", client.scheduler.address, "--chunk-size", "2"],
        capture_output=True,
        env=env,
        timeout=120,
    )
    assert res.returncode == 0, res.stderr.decode()
    annotate([CURATED[0]], tmp_path / "l", jobs=1, chunk_size=2)
    assert_same_tables(tmp_path / "l", tmp_path / "c")


def test_run_interrupted_locally_resumes_on_the_cluster_to_the_same_tables(client, tmp_path):
    lines = [f"C1CCC(C{'C' * (k % 7)})CC1 q{k}" for k in range(40)]
    lines.insert(25, f"{paced_engine.INTERRUPT_SMILES} cyclohexanol")
    src = tmp_path / "set.smi"
    src.write_text("\n".join(lines) + "\n")
    annotate([src], tmp_path / "reference", chunk_size=5, jobs=1)
    out = tmp_path / "run"
    with pytest.raises(KeyboardInterrupt):
        annotate([src], out, chunk_size=5, jobs=1, analyzer=paced_engine.interrupt_on_marked)
    assert manifest(out)["finished_chunks"] == 5 and manifest(out)["status"] == "running"
    kept = {p: p.stat().st_mtime_ns for p in out.glob("*/part-*.parquet")}
    (out / "rings" / ".part-000005.parquet.tmp").write_bytes(b"PAR1 half")  # a kill mid-write
    summary = annotate([], out, resume=True, scheduler=client.scheduler.address)
    assert summary["resumed"] and summary["records"] == 41
    assert all(p.stat().st_mtime_ns == ns for p, ns in kept.items())  # finished chunks not redone
    assert_same_tables(tmp_path / "reference", out)
    assert manifest(out)["counts"] == manifest(tmp_path / "reference")["counts"]
    assert not list(out.glob("*/.*.tmp"))


def test_record_timeout_applies_in_worker_threads(client, tmp_path):
    src = tmp_path / "slow.smi"
    src.write_text(f"C1CCCCC1 fast\n{paced_engine.SLOW_SMILES} slow\nOC1CCCCC1 after\n")
    started = time.monotonic()
    summary = annotate(
        [src],
        tmp_path / "run",
        chunk_size=3,
        record_timeout=0.5,
        analyzer=busy_on_marked,
        scheduler=client,
    )
    err = tables(tmp_path / "run")["errors"]
    assert list(err.mol_id) == ["slow"] and "longer than 0.5 s" in err.reason.iloc[0]
    assert summary["timeouts"] == 1 and summary["molecules"] == 2
    assert time.monotonic() - started < 20  # stopped, not waited out (it spins for 60 s)


def test_a_record_that_kills_its_worker_becomes_an_error_row(client, tmp_path):
    src = tmp_path / "crash.smi"
    lines = [f"C1CCC(C{'C' * k})CC1 m{k}" for k in range(5)]
    lines.insert(3, f"{paced_engine.CRASH_SMILES} crasher")
    src.write_text("\n".join(lines) + "\n")
    summary = annotate(
        [src], tmp_path / "run", chunk_size=3, analyzer=paced_engine.crash_on_marked, scheduler=client
    )
    t = tables(tmp_path / "run")
    assert list(t["errors"].mol_id) == ["crasher"] and "crashed its worker" in t["errors"].reason.iloc[0]
    assert list(t["molecules"].mol_id) == [f"m{k}" for k in range(5)]
    assert summary["internal_errors"] == 1
    client.wait_for_workers(2, timeout=30)  # the nanny restarted the killed worker


def test_jobs_with_scheduler_unknown_scheme_and_unreachable_scheduler_are_refused(tmp_path):
    with pytest.raises(UsageError, match="exclude each other"):
        annotate(CURATED[:1], tmp_path / "a", jobs=2, scheduler="tcp://127.0.0.1:1")
    with pytest.raises(UsageError, match="--scheduler"):
        annotate(CURATED[:1], tmp_path / "b", scheduler="nonsense://127.0.0.1:1")
    assert not (tmp_path / "b").exists()  # refused before the output directory was made


def test_unreachable_scheduler_is_a_fatal_error_naming_it(tmp_path, monkeypatch):
    import libconf.pipeline.run as run

    monkeypatch.setattr(run, "DASK_CONNECT_TIMEOUT_S", 1.0)
    with pytest.raises(FatalError, match=r"cannot reach the Dask scheduler at tcp://127\.0\.0\.1:1"):
        annotate(CURATED[:1], tmp_path / "c", scheduler="tcp://127.0.0.1:1")
    assert not (tmp_path / "c").exists()


def test_annotate_frame_runs_as_dask_map_partitions_with_a_fixed_meta(client):
    smiles = ["CC1CCCCC1", "c1ccccc1", "C1CC(", "xx", None, "O[C@H]1CC[C@H](C(C)(C)C)CC1", "C1CCOCC1"]
    pdf = pd.DataFrame({"smiles": smiles, "vendor_id": [f"QR-{k}" for k in range(7)]})
    # partitions of 2 rows: [0,1] valid/no ring, [2,3] all invalid, [4,5], [6]
    ddf = dd.from_pandas(pdf, chunksize=2, sort=False)
    assert ddf.npartitions == 4
    lazy = ddf.map_partitions(annotate_frame, id_column="vendor_id", meta=frame_meta())
    got = client.compute(lazy).result()
    want = annotate_frame(pdf, id_column="vendor_id")
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert (got.dtypes == frame_meta().dtypes).all()
    assert got.error.notna().tolist() == [False, False, True, True, True, False, False]


def test_url_inputs_are_read_by_the_client_and_give_the_same_rows(client, tmp_path):
    import fsspec

    with fsspec.open("memory://libconf-test/mixed.smi.gz", "wb") as fh:
        fh.write(gzip.compress((DATA / "mixed.smi").read_bytes()))
    urls = ["memory://libconf-test/mixed.smi.gz", (DATA / "quoted.csv").as_uri()]
    annotate(urls, tmp_path / "url", chunk_size=3, scheduler=client)
    annotate([DATA / "mixed.smi", DATA / "quoted.csv"], tmp_path / "local", jobs=1, chunk_size=3)
    got, want = tables(tmp_path / "url"), tables(tmp_path / "local")
    for t in TABLES:
        assert set(got[t].input_file) <= set(urls)
        cols = [c for c in want[t].columns if c != "input_file"]  # ids from the same stems
        pd.testing.assert_frame_equal(got[t][cols], want[t][cols], check_exact=True, obj=t)
    m = manifest(tmp_path / "url")
    assert [i["path"] for i in m["inputs"]] == urls
    with pytest.raises(FatalError, match="does not exist"):
        annotate(["memory://libconf-test/none.smi"], tmp_path / "none", jobs=1)


def test_workers_with_other_parameter_tables_are_refused(client, tmp_path, monkeypatch):
    import libconf.pipeline.run as run

    # Only this process sees the patch; the workers report the real tables' hash.
    monkeypatch.setattr(run, "parameters_digest", lambda: "0" * 64)
    with pytest.raises(FatalError, match="install the same version on every worker"):
        annotate(CURATED[:1], tmp_path / "v", scheduler=client)
    assert not (tmp_path / "v").exists()


def test_a_client_that_never_answers_stops_the_run_with_a_fatal_error(tmp_path, monkeypatch):
    # a Client() that neither connects nor fails (seen once on a closed port) must not hang the run
    import threading

    import distributed

    import libconf.pipeline.run as run

    release = threading.Event()

    class SilentClient:
        def __init__(self, *args, **kwargs):
            release.wait(30)
            raise OSError("released by the test")

    monkeypatch.setattr(distributed, "Client", SilentClient)
    monkeypatch.setattr(run, "DASK_CONNECT_TIMEOUT_S", 0.2)
    monkeypatch.setattr(run, "DASK_CONNECT_GRACE_S", 0.3)
    try:
        with pytest.raises(FatalError, match=r"cannot reach the Dask scheduler at tcp://127\.0\.0\.1:9.*no answer within 0\.5 s"):
            annotate(CURATED[:1], tmp_path / "c", scheduler="tcp://127.0.0.1:9")
    finally:
        release.set()
    assert not (tmp_path / "c").exists()

"""``annotate``: inputs → chunks → worker processes → Parquet parts, in input order.

The run is cut into chunks of ``chunk_size`` records (a chunk never spans two input
files). Chunks are analysed in parallel by joblib's loky worker processes, at most a
few per worker in flight so memory stays flat whatever the input size, and written in
chunk order; after each chunk's four part files are in place, ``manifest.json`` is
rewritten (atomically) with the count of finished chunks. Since chunks finish in order,
the finished chunks are always chunks ``0 .. finished_chunks - 1``, and ``--resume``
skips exactly those.

With ``scheduler=`` (``--scheduler ADDRESS``) the same chunks go to the workers of a
Dask cluster instead (:class:`_DaskExecutor`); this process still reads the inputs and
writes every part file and the manifest, so only it needs the files.
"""

from __future__ import annotations

import collections
import contextlib
import hashlib
import json
import os
import platform
import shutil
import sys
import tempfile
import threading
import time
from collections.abc import Callable, Iterable, Iterator, Sequence
from typing import Any, BinaryIO

import pyarrow as pa

from libconf.engine import MEDIA
from libconf.pipeline.failures import FatalError, UsageError
from libconf.pipeline.readers import (
    InputSpec,
    Record,
    detect_format,
    estimate_records,
    probe_columns,
    read_records,
    truncate_raw,
)
from libconf.pipeline.tables import TABLES, fsync_dir, part_name, write_part
from libconf.pipeline.work import HUNG_EXIT_STATUS, AnalysisOptions, ChunkResult, analyse_chunk, hard_limit

MANIFEST = "manifest.json"
MANIFEST_FORMAT = 1

#: Parameters that change the tables; a resumed run must use the same values.
DEFAULTS: dict[str, Any] = {
    "temperature": 298.15,
    "medium": "water",
    "chunk_size": 2000,
    "smiles_column": None,
    "id_column": None,
    "record_timeout": 10.0,
    "max_heavy_atoms": 500,
    "max_stereo_assignments": 64,
}

COUNT_KEYS = (
    "records",
    "molecules",
    "molecules_with_rings",
    "locked_scaffolds",
    "rings",
    "substituents",
    "errors",
    "errors_read",
    "errors_parse",
    "errors_analyse",
    "timeouts",
    "internal_errors",
)


def libconf_version() -> str:
    import libconf

    return str(getattr(libconf, "__version__", "unknown"))


def parameters_digest() -> str:
    """sha256 of the engine's parameter tables: results change when they do."""
    try:
        from libconf import parameters

        return parameters.load().digest()
    except Exception as exc:  # reported in the manifest, not fatal here
        return f"unavailable ({type(exc).__name__})"


def model_digest() -> str:
    """sha256 of the A-value model file ("none" without one); a model file that does not
    match its recorded hash, or is not a model file, is fatal before any record is read."""
    from libconf.model.artefact import ModelFileError, load_model

    try:
        model = load_model()
    except ModelFileError as exc:
        raise FatalError(str(exc)) from None
    return "none" if model is None else model.digest


#: Versions that must match for a run to be resumed (the rest are recorded only).
RESUME_VERSIONS = ("libconf", "parameters_sha256", "model_sha256")


def _versions() -> dict:
    import joblib
    import rdkit

    return {
        "libconf": libconf_version(),
        "parameters_sha256": parameters_digest(),
        "model_sha256": model_digest(),
        "python": platform.python_version(),
        "rdkit": rdkit.__version__,
        "pyarrow": pa.__version__,
        "joblib": joblib.__version__,
    }


# --- options ----------------------------------------------------------------------------


def _check_parameters(p: dict) -> dict:
    try:
        p["temperature"] = float(p["temperature"])
        p["chunk_size"] = int(p["chunk_size"])
        p["max_heavy_atoms"] = int(p["max_heavy_atoms"])
        p["max_stereo_assignments"] = int(p["max_stereo_assignments"])
        p["record_timeout"] = float(p["record_timeout"] or 0.0)
    except (TypeError, ValueError) as exc:
        raise UsageError(f"invalid option value: {exc}") from exc
    if not 0 < p["temperature"] < 10000:
        raise UsageError(f"--temperature must be in kelvin, above 0 (got {p['temperature']})")
    if p["medium"] not in MEDIA:
        raise UsageError(f"--medium must be one of {', '.join(MEDIA)} (got {p['medium']!r})")
    if p["chunk_size"] < 1:
        raise UsageError("--chunk-size must be at least 1")
    if p["record_timeout"] < 0:
        raise UsageError("--record-timeout must be 0 (no limit) or a number of seconds")
    if p["max_heavy_atoms"] < 1 or p["max_stereo_assignments"] < 1:
        raise UsageError("the heavy-atom and stereo-enumeration limits must be at least 1")
    return p


def auto_chunk_size(n_records: int, jobs: int) -> int:
    """Default chunk size: about four chunks per worker, between 10 and 2000 records.

    Small libraries still keep every worker busy; large ones get chunks big enough
    that part files and manifest updates stay few.
    """
    return max(10, min(DEFAULTS["chunk_size"], -(-n_records // (4 * jobs))))


def _default_jobs() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


# --- inputs -----------------------------------------------------------------------------


def _file_digest(path: str) -> tuple[int, str]:
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        while block := fh.read(1 << 20):
            h.update(block)
            size += len(block)
    return size, h.hexdigest()


def _spool_stdin(stream: BinaryIO) -> str:
    # stdin is read once, to a temporary file, so that it can be hashed (for --resume)
    # and streamed like any other input without holding it in memory.
    fd, path = tempfile.mkstemp(prefix="libconf-stdin-", suffix=".smi")
    with os.fdopen(fd, "wb") as out:
        shutil.copyfileobj(stream, out, 1 << 20)
    return path


def _is_url(name: str) -> bool:
    return "://" in name and not os.path.exists(name)


def _spool_url(url: str) -> str:
    """Copy a remote input (any fsspec URL: s3://, gs://, https://, memory://, file://)
    to a local temporary file, read and hashed like a local one."""
    try:
        import fsspec
    except ImportError:
        raise UsageError(
            f"{url}: URL inputs need fsspec; install the 'cluster' extra or copy the file here"
        ) from None
    fd, path = tempfile.mkstemp(prefix="libconf-url-")
    try:
        with os.fdopen(fd, "wb") as out, fsspec.open(url, "rb") as src:
            shutil.copyfileobj(src, out, 1 << 20)
    except FileNotFoundError as exc:
        os.unlink(path)
        raise FatalError(f"input {url} does not exist") from exc
    except (ImportError, ValueError) as exc:  # unknown protocol, its driver missing
        os.unlink(path)
        raise UsageError(f"{url}: {exc}") from exc
    except OSError as exc:
        os.unlink(path)
        raise FatalError(f"cannot read input {url}: {exc}") from exc
    return path


def _resolve_inputs(
    names: Sequence[str],
    stdin: BinaryIO | None,
    smiles_column: str | None,
    id_column: str | None,
    spools: list[str],
) -> list[tuple[InputSpec, dict]]:
    if not names:
        raise UsageError("give at least one input file (or - for SMILES on stdin)")
    seen: set[str] = set()
    resolved = []
    for name in names:
        name = str(name)
        if name == "-":
            if "-" in seen:
                raise UsageError("- (stdin) can be given only once")
            seen.add("-")
            path = _spool_stdin(stdin if stdin is not None else sys.stdin.buffer)
            spools.append(path)
            spec = InputSpec(name, path, "smiles", False, "stdin")
        elif _is_url(name):
            if name in seen:
                raise UsageError(f"{name} is given twice")
            seen.add(name)
            fmt, compressed, stem = detect_format(name.split("?", 1)[0])
            path = _spool_url(name)
            spools.append(path)
            spec = InputSpec(name, path, fmt, compressed, stem)
        else:
            key = os.path.realpath(name)
            if key in seen:
                raise UsageError(f"{name} is given twice")
            seen.add(key)
            fmt, compressed, stem = detect_format(name)
            if not os.path.exists(name):
                raise FatalError(f"input file {name} does not exist")
            if not os.path.isfile(name):
                raise FatalError(f"input {name} is not a file")
            if not os.access(name, os.R_OK):
                raise FatalError(f"cannot read input file {name}: permission denied")
            spec = InputSpec(name, name, fmt, compressed, stem)
        try:
            size, sha = _file_digest(spec.path)
        except OSError as exc:
            raise FatalError(f"cannot read input file {name}: {exc.strerror or exc}") from exc
        probe_columns(spec, smiles_column, id_column)
        info = {
            "name": spec.input_file,
            "path": name if name == "-" or _is_url(name) else os.path.abspath(name),
            "format": spec.format,
            "compressed": spec.compressed,
            "size": size,
            "sha256": sha,
            "smiles_column": spec.smiles_column,
            "id_column": spec.id_column,
        }
        resolved.append((spec, info))
    return resolved


def _chunks(specs: Iterable[InputSpec], chunk_size: int) -> Iterator[tuple[int, list[Record]]]:
    chunk = 0
    for spec in specs:
        batch: list[Record] = []
        for rec in read_records(spec):
            batch.append(rec)
            if len(batch) == chunk_size:
                yield chunk, batch
                chunk += 1
                batch = []
        if batch:
            yield chunk, batch
            chunk += 1


# --- output directory -------------------------------------------------------------------


def _write_json_atomic(path: str, data: dict) -> None:
    tmp = os.path.join(os.path.dirname(path), "." + os.path.basename(path) + ".tmp")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            json.dump(data, fh, indent=2, sort_keys=False)
            fh.write("\n")
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        raise FatalError(f"cannot write {path}: {exc.strerror or exc}") from exc


def _read_manifest(out_dir: str) -> dict | None:
    path = os.path.join(out_dir, MANIFEST)
    if not os.path.exists(path):
        return None
    try:
        with open(path, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError) as exc:
        raise UsageError(f"{path} cannot be read ({exc}); start again with --overwrite") from exc
    if data.get("tool") != "libconf annotate":
        raise UsageError(f"{path} is not a libconf annotate manifest")
    return data


def _ours(entry: str) -> bool:
    return entry in TABLES or entry in (MANIFEST, "." + MANIFEST + ".tmp")


def _has_parts(out_dir: str) -> bool:
    for t in TABLES:
        folder = os.path.join(out_dir, t)
        if os.path.isdir(folder) and any(f.endswith(".parquet") for f in os.listdir(folder)):
            return True
    return False


def _prepare_out_dir(out_dir: str, resume: bool, overwrite: bool) -> dict | None:
    """Return the manifest to resume from, or None for a fresh run (dir ready)."""
    if resume and overwrite:
        raise UsageError("--resume and --overwrite contradict each other; choose one")
    if os.path.exists(out_dir) and not os.path.isdir(out_dir):
        raise UsageError(f"--out {out_dir} exists and is not a directory")
    entries = os.listdir(out_dir) if os.path.isdir(out_dir) else []
    if all(e in TABLES and not os.listdir(os.path.join(out_dir, e)) for e in entries):
        entries = []  # only our empty table folders: a run that stopped before starting
    if resume:
        manifest = _read_manifest(out_dir) if entries else None
        if manifest is not None:
            return manifest
        if entries and (not all(_ours(e) for e in entries) or _has_parts(out_dir)):
            raise UsageError(
                f"cannot resume: {out_dir} has no {MANIFEST}, so it is not an interrupted "
                "libconf run; use --overwrite to start again there, or another --out"
            )
        # Killed before the manifest was written: nothing was finished, start afresh.
    elif entries:
        if not overwrite:
            raise UsageError(
                f"output directory {out_dir} is not empty; add --resume to continue the "
                "run in it, --overwrite to replace it, or choose another --out"
            )
        foreign = sorted(e for e in entries if not _ours(e))
        if foreign:
            raise UsageError(
                f"--overwrite refused: {out_dir} holds files libconf did not write "
                f"({', '.join(foreign[:5])}{', ...' if len(foreign) > 5 else ''}); "
                "choose another --out"
            )
        for e in entries:
            p = os.path.join(out_dir, e)
            shutil.rmtree(p) if os.path.isdir(p) else os.unlink(p)
    try:
        os.makedirs(out_dir, exist_ok=True)
        for t in TABLES:
            os.makedirs(os.path.join(out_dir, t), exist_ok=True)
    except OSError as exc:
        raise FatalError(f"cannot create output directory {out_dir}: {exc.strerror or exc}") from exc
    return None


def _drop_unfinished_parts(out_dir: str, finished: int) -> None:
    for t in TABLES:
        folder = os.path.join(out_dir, t)
        os.makedirs(folder, exist_ok=True)
        for f in os.listdir(folder):
            path = os.path.join(folder, f)
            if f.endswith(".tmp"):
                os.unlink(path)
            elif f.startswith("part-") and f.endswith(".parquet"):
                try:
                    n = int(f[5:-8])
                except ValueError:
                    continue
                if n >= finished:
                    os.unlink(path)


def _merge_parameters(given: dict, manifest: dict | None) -> dict:
    if manifest is None:
        return {k: (DEFAULTS[k] if given.get(k) is None else given[k]) for k in DEFAULTS}
    stored = manifest["parameters"]
    merged = {}
    for k in DEFAULTS:
        if given.get(k) is None:
            merged[k] = stored.get(k, DEFAULTS[k])
        else:
            merged[k] = given[k]
    merged = _check_parameters(merged)
    for k in DEFAULTS:
        if merged[k] != stored.get(k, DEFAULTS[k]):
            flag = "--" + k.replace("_", "-")
            raise UsageError(
                f"cannot resume: the run was started with {flag} {stored.get(k)}, this "
                f"command asks for {merged[k]}; repeat the original options, or start "
                "again with --overwrite"
            )
    return merged


def _check_same_versions(manifest: dict) -> None:
    before, now = manifest.get("versions", {}), _versions()
    for key in RESUME_VERSIONS:
        if before.get(key) != now[key]:
            what = {"libconf": "libconf", "parameters_sha256": "libconf's parameter tables (sha256)"}.get(
                key, "the A-value model file (sha256)"
            )
            raise UsageError(
                f"cannot resume: the run was started with {what} {before.get(key)}, this is "
                f"{now[key]}; its results would differ, so start again with --overwrite"
            )


def _check_same_inputs(infos: list[dict], manifest: dict) -> None:
    before = manifest["inputs"]
    if len(before) != len(infos):
        raise UsageError(
            f"cannot resume: the run was started on {len(before)} input(s), this command "
            f"gives {len(infos)}; give the same inputs in the same order (or none)"
        )
    for old, new in zip(before, infos, strict=True):
        if old["sha256"] != new["sha256"] or old["format"] != new["format"]:
            raise UsageError(
                f"cannot resume: input {new['name']} is not the file the run was started "
                f"on ({old['name']}, sha256 {old['sha256'][:12]}…, now "
                f"{new['sha256'][:12]}…); it has changed. Start again with --overwrite"
            )
        if old.get("smiles_column") != new.get("smiles_column") or old.get("id_column") != new.get(
            "id_column"
        ):
            raise UsageError(
                f"cannot resume: input {new['name']} is read with other columns than "
                "when the run started; repeat the original --smiles-column/--id-column"
            )


# --- execution --------------------------------------------------------------------------


class _Executor:
    """Ordered, bounded parallel map of analyse_chunk over chunks (loky processes)."""

    def __init__(self, jobs: int, options: AnalysisOptions, analyzer: Callable | None):
        # joblib's wrapper of loky's reusable pool, not loky's own: both share one
        # process-wide pool, and joblib.Parallel (scikit-learn's n_jobs) fails on a pool
        # that loky's plain function created.
        from joblib.executor import get_memmapping_executor

        self._get = get_memmapping_executor
        self.jobs = jobs
        self.options = options
        self.analyzer = analyzer
        self.window = max(2 * jobs, 2)

    def _pool(self, workers: int):
        """The process pool with ``workers`` processes. Fetched once, not per chunk: each
        fetch makes joblib register a new temporary folder with its resource tracker.
        Fetched again after a worker died (the pool is then broken) or to resize it."""
        cached = self.__dict__.get("_cached_pool")
        if cached is not None and cached[0] == workers and not _is_broken(cached[1]):
            return cached[1]
        pool = self._get(workers, timeout=60)
        self._cached_pool = (workers, pool)
        return pool

    def _submit(self, chunk: int, records: list[Record]):
        return self._pool(self.jobs).submit(analyse_chunk, chunk, records, self.options, self.analyzer)

    def _fill(self, source: Iterator[tuple[int, list[Record]]], pending: collections.deque) -> bool:
        """Top the window of chunks in flight up; False once the source is exhausted."""
        while len(pending) < self.window:
            try:
                chunk, records = next(source)
            except StopIteration:
                return False
            pending.append((chunk, records, self._submit(chunk, records)))
        return True

    def map(self, chunks: Iterator[tuple[int, list[Record]]]) -> Iterator[ChunkResult]:
        pending: collections.deque = collections.deque()
        try:
            yield from self._ordered(chunks, pending)
        finally:
            # Interrupted or failed: drop the queued chunks; a resumed run redoes them.
            for _, _, fut in pending:
                fut.cancel()

    def _ordered(self, chunks: Iterator[tuple[int, list[Record]]], pending: collections.deque):
        from joblib.externals.loky.process_executor import BrokenProcessPool

        source = iter(chunks)
        more = True
        while True:
            more = more and self._fill(source, pending)
            if not pending:
                return
            chunk, records, fut = pending[0]
            try:
                result = fut.result()
            except BrokenProcessPool:
                # A worker died (a crash inside native code on some record). Redo the
                # pending chunks one at a time to find the record, then carry on.
                for c, recs, _ in list(pending):
                    yield self._isolated(c, recs)
                pending.clear()
                continue
            pending.popleft()
            yield result

    def _run_alone(self, chunk: int, records: list[Record]) -> ChunkResult | str:
        """The chunk's result, or why its worker process died."""
        from joblib.externals.loky.process_executor import BrokenProcessPool

        try:
            return self._pool(1).submit(analyse_chunk, chunk, records, self.options, self.analyzer).result()
        except BrokenProcessPool as exc:
            if f"EXIT({HUNG_EXIT_STATUS})" in str(exc):
                limit = hard_limit(self.options.record_timeout or 0.0)
                return (
                    f"analysis was still running after {limit:g} s and could not be "
                    "interrupted (stuck inside native code), so its worker process was stopped"
                )
            return (
                "the analysis crashed its worker process on this record (a fault in native "
                "code, or too much memory); please report it with the raw record"
            )

    def _isolated(self, chunk: int, records: list[Record]) -> ChunkResult:
        result = self._run_alone(chunk, records)
        if not isinstance(result, str):
            return result
        parts = []
        for rec in records:
            one = self._run_alone(chunk, [rec])
            if isinstance(one, str):
                key = "timeouts" if "could not be interrupted" in one else "internal_errors"
                one = self._error_row(chunk, rec, one, key)
            parts.append(one)
        return _merge(chunk, parts)

    def _error_row(self, chunk: int, rec: Record, reason: str, count_key: str) -> ChunkResult:
        """A record that took its worker down, as an ``analyse`` error row."""
        failed = rec._replace(
            kind="error", text="", raw=rec.raw or truncate_raw(rec.text), reason=reason, stage="analyse"
        )
        one = analyse_chunk(chunk, [failed], self.options, self.analyzer)
        one.counts[count_key] = 1
        return one


def _is_broken(pool) -> bool:
    """Whether a loky pool can take no more work (a worker died, or it was shut down)."""
    flags = getattr(pool, "_flags", None)
    return flags is None or bool(getattr(flags, "broken", None)) or bool(getattr(flags, "shutdown", False))


def _merge(chunk: int, parts: list[ChunkResult]) -> ChunkResult:
    """One chunk's result from the results of its pieces, in order."""
    columns = {t: {c: [v for p in parts for v in p.columns[t][c]] for c in parts[0].columns[t]} for t in TABLES}
    counts: collections.Counter = collections.Counter()
    for p in parts:
        counts.update(p.counts)
    return ChunkResult(chunk, columns, dict(counts))


# --- execution on a Dask cluster ---------------------------------------------------------

#: Seconds to wait for the scheduler to answer, and for a first worker to join it.
DASK_CONNECT_TIMEOUT_S = 10.0
DASK_CONNECT_GRACE_S = 20.0  # beyond the connect timeout, before giving up on a silent Client()
DASK_WORKER_WAIT_S = 30.0


def _connect(scheduler: Any) -> tuple[Any, bool]:
    """A ``distributed.Client`` for ``scheduler`` (an address or a Client) and whether we own it."""
    try:
        from distributed import Client
    except ImportError:
        raise UsageError(
            "--scheduler needs dask.distributed, which is not installed; install the "
            "'cluster' extra (pip install 'libconf-sixring[cluster]') or leave out --scheduler"
        ) from None
    if isinstance(scheduler, Client):
        return scheduler, False
    if not isinstance(scheduler, str) or not scheduler.strip():
        raise UsageError(f"--scheduler must be an address such as tcp://host:8786 (got {scheduler!r})")
    address = scheduler.strip()
    try:
        client = _client_within(Client, address, DASK_CONNECT_TIMEOUT_S)
    except ValueError as exc:  # unknown scheme, malformed address
        raise UsageError(f"--scheduler {address}: {exc}") from exc
    except Exception as exc:  # OSError, TimeoutError, and whatever else a failed connect raises
        raise FatalError(
            f"cannot reach the Dask scheduler at {address} ({type(exc).__name__}: {exc}); start one "
            "with `dask scheduler` and workers with `dask worker ADDRESS`, or check the address"
        ) from exc
    return client, True


def _client_within(Client, address: str, timeout: float):
    """``Client(address, timeout=timeout)``, but never waiting much longer than asked: the
    constructor runs in a daemon thread, and if it has neither connected nor failed a
    grace period after its own timeout (one test run saw it wait more than 18 minutes on
    a closed port), the run stops with a TimeoutError instead of hanging."""
    box: dict = {}

    def connect() -> None:
        try:
            box["client"] = Client(address, timeout=timeout, set_as_default=False)
        except BaseException as exc:  # handed to the caller's thread
            box["error"] = exc

    t = threading.Thread(target=connect, name="libconf-dask-connect", daemon=True)
    t.start()
    t.join(timeout + DASK_CONNECT_GRACE_S)
    if "error" in box:
        raise box["error"]
    if "client" not in box:
        raise TimeoutError(f"no answer within {timeout + DASK_CONNECT_GRACE_S:g} s")
    return box["client"]


def _worker_versions() -> tuple[str, str, str]:
    return libconf_version(), parameters_digest(), model_digest()


def _cluster_threads(client: Any) -> int:
    """Worker threads on the cluster, after checking they run the same libconf as we do."""
    try:
        client.wait_for_workers(1, timeout=DASK_WORKER_WAIT_S)
    except (OSError, TimeoutError) as exc:
        raise FatalError(
            f"no Dask worker joined the scheduler at {client.scheduler.address} within "
            f"{DASK_WORKER_WAIT_S:g} s; start workers with `dask worker {client.scheduler.address}`"
        ) from exc
    try:
        found = client.run(_worker_versions)
    except Exception as exc:  # the worker cannot even import libconf
        raise FatalError(
            f"the Dask workers cannot run libconf ({type(exc).__name__}: {exc}); install the "
            "same libconf-sixring on every worker"
        ) from exc
    here = _worker_versions()
    for worker, theirs in sorted(found.items()):
        if tuple(theirs) != here:
            raise FatalError(
                f"Dask worker {worker} runs libconf {theirs[0]} with parameter tables "
                f"{theirs[1][:12]}… and model {theirs[2][:12]}…, this process {here[0]} with "
                f"{here[1][:12]}… and {here[2][:12]}…; its rows "
                "would differ, so install the same version on every worker"
            )
    return max(1, sum(client.nthreads().values()))


class _ThreadTimeGuard:
    """``--record-timeout`` for a record analysed in a Dask worker's thread.

    SIGALRM reaches only a process's main thread and Dask runs tasks in a thread pool,
    so a timer thread raises RecordTimeout in the analysing thread instead. Like the
    alarm, it takes effect when that thread next runs Python code.
    """

    def __init__(self, analyze: Callable, seconds: float):
        self.analyze = analyze
        self.seconds = seconds

    def __call__(self, target, **options):
        import ctypes
        import threading

        from libconf.pipeline.work import RecordTimeout

        ident = threading.get_ident()
        state = {"done": False}
        lock = threading.Lock()

        def fire() -> None:
            with lock:
                if not state["done"]:
                    ctypes.pythonapi.PyThreadState_SetAsyncExc(
                        ctypes.c_ulong(ident), ctypes.py_object(RecordTimeout)
                    )

        timer = threading.Timer(self.seconds, fire)
        timer.daemon = True
        timer.start()
        try:
            return self.analyze(target, **options)
        finally:
            with lock:
                state["done"] = True
            timer.cancel()


def _analyse_chunk_on_worker(
    chunk: int, records: list[Record], options: AnalysisOptions, analyzer: Callable | None
) -> ChunkResult:
    import threading

    from libconf.pipeline.work import default_analyzer

    if options.record_timeout and threading.current_thread() is not threading.main_thread():
        analyzer = _ThreadTimeGuard(analyzer or default_analyzer(), options.record_timeout)
    return analyse_chunk(chunk, records, options, analyzer)


class _DaskExecutor(_Executor):
    """The same ordered, bounded map, with chunks as tasks on a Dask cluster.

    At most ``2 × worker threads`` chunks are in flight. A record that kills its worker
    process makes Dask give up on the chunk (``KilledWorker`` once the task has taken
    down ``distributed.scheduler.allowed-failures`` workers); the chunk is then re-run
    record by record, as with local worker processes.
    """

    def __init__(self, client: Any, jobs: int, options: AnalysisOptions, analyzer: Callable | None):
        self.client = client
        self.jobs = jobs
        self.options = options
        self.analyzer = analyzer
        self.window = max(2 * jobs, 2)

    def _submit(self, chunk: int, records: list[Record]):
        return self.client.submit(
            _analyse_chunk_on_worker, chunk, records, self.options, self.analyzer, pure=False
        )

    def _ordered(self, chunks: Iterator[tuple[int, list[Record]]], pending: collections.deque):
        from distributed import KilledWorker

        source = iter(chunks)
        more = True
        while True:
            more = more and self._fill(source, pending)
            if not pending:
                return
            chunk, records, fut = pending[0]
            try:
                result = fut.result()
            except KilledWorker:
                result = self._isolated(chunk, records)
            pending.popleft()
            yield result

    def _isolated(self, chunk: int, records: list[Record]) -> ChunkResult:
        """The chunk re-run one record per task; a record that still kills its worker
        becomes an ``analyse`` error row."""
        from distributed import KilledWorker

        futures = [self._submit(chunk, [rec]) for rec in records]
        parts = []
        for rec, fut in zip(records, futures, strict=True):
            try:
                parts.append(fut.result())
                continue
            except KilledWorker:
                pass
            try:
                # Alone this time: it may only have been queued on the worker that died.
                parts.append(self._submit(chunk, [rec]).result())
            except KilledWorker:
                reason = (
                    "the analysis crashed its worker process on this record (a fault in "
                    "native code, or too much memory); please report it with the raw record"
                )
                parts.append(self._error_row(chunk, rec, reason, "internal_errors"))
        return _merge(chunk, parts)


def _progress_bar(enabled: bool, total: int | None):
    if not enabled:
        return None
    from tqdm import tqdm

    return tqdm(
        total=total,
        unit=" records",
        unit_scale=True,
        file=sys.stderr,
        dynamic_ncols=True,
        smoothing=0.1,
        desc="annotate",
    )


def annotate(
    inputs: Sequence[str | os.PathLike] | str | os.PathLike,
    out_dir: str | os.PathLike,
    *,
    jobs: int | None = None,
    chunk_size: int | None = None,
    temperature: float | None = None,
    medium: str | None = None,
    smiles_column: str | None = None,
    id_column: str | None = None,
    record_timeout: float | None = None,
    max_heavy_atoms: int | None = None,
    max_stereo_assignments: int | None = None,
    resume: bool = False,
    overwrite: bool = False,
    progress: bool = False,
    analyzer: Callable | None = None,
    stdin: BinaryIO | None = None,
    scheduler: Any = None,
) -> dict:
    """Annotate every record of ``inputs`` and write the four tables under ``out_dir``.

    Returns the summary (the ``counts`` of the manifest plus wall time). Options left
    at None take their defaults, or on ``resume=True`` the values the run started with.
    ``analyzer`` replaces ``libconf.engine.analyze`` (same signature): for tests and
    custom engines. ``scheduler`` (a Dask scheduler address such as
    ``"tcp://10.0.0.5:8786"``, or a ``distributed.Client``) runs the chunks on that
    cluster's workers instead of ``jobs`` local processes; the tables are the same.
    Raises UsageError (bad options, refused directory) or FatalError (unreadable input,
    unwritable output, unreachable scheduler).

    >>> summary = annotate(["library.smi.gz"], "run1", jobs=4)  # doctest: +SKIP
    >>> summary["records"] == summary["molecules"] + summary["errors"]  # doctest: +SKIP
    True
    """
    start = time.perf_counter()
    if scheduler is None:
        return _annotate(**locals())
    if jobs is not None:
        raise UsageError("--jobs and --scheduler exclude each other: the cluster's workers do the work")
    client, owned = _connect(scheduler)
    try:
        return _annotate(**{**locals(), "jobs": _cluster_threads(client), "scheduler": client})
    finally:
        if owned:
            client.close()


def _annotate(
    inputs,
    out_dir,
    *,
    jobs,
    chunk_size,
    temperature,
    medium,
    smiles_column,
    id_column,
    record_timeout,
    max_heavy_atoms,
    max_stereo_assignments,
    resume,
    overwrite,
    progress,
    analyzer,
    stdin,
    scheduler,
    start,
    **_,
) -> dict:
    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    names = [os.fspath(i) for i in inputs]
    out_dir = os.fspath(out_dir)
    if jobs is None:
        jobs = _default_jobs()
    if not isinstance(jobs, int) or jobs < 1:
        raise UsageError(f"--jobs must be a whole number of at least 1 (got {jobs!r})")
    given = {
        "temperature": temperature,
        "medium": medium,
        "chunk_size": chunk_size,
        "smiles_column": smiles_column,
        "id_column": id_column,
        "record_timeout": record_timeout,
        "max_heavy_atoms": max_heavy_atoms,
        "max_stereo_assignments": max_stereo_assignments,
    }
    given_checked = _check_parameters({**DEFAULTS, **{k: v for k, v in given.items() if v is not None}})
    given = {k: (given_checked[k] if given[k] is not None else None) for k in given}

    manifest = _prepare_out_dir(out_dir, resume, overwrite)
    if manifest is not None and not names:
        names = [i["path"] for i in manifest["inputs"]]
        if "-" in names:
            raise UsageError(
                "cannot resume a run that read stdin without it: pipe the "
                "same input again and give - as the input"
            )
    params = _merge_parameters(given, manifest)
    if manifest is not None:
        _check_same_versions(manifest)

    spools: list[str] = []
    try:
        resolved = _resolve_inputs(names, stdin, params["smiles_column"], params["id_column"], spools)
        specs = [s for s, _ in resolved]
        infos = [i for _, i in resolved]
        total: int | None = None  # records expected (an upper estimate)
        if manifest is not None:
            _check_same_inputs(infos, manifest)
            # Same files (by hash), maybe named from another working directory: keep
            # the names the run started with, so input_file agrees across chunks.
            for spec, info, old in zip(specs, infos, manifest["inputs"], strict=True):
                spec.name = info["name"] = old["name"]
            finished = int(manifest["finished_chunks"])
            counts = {k: int(manifest["counts"].get(k, 0)) for k in COUNT_KEYS}
            _drop_unfinished_parts(out_dir, finished)
            manifest["status"] = "running"
            manifest["resumed"] = int(manifest.get("resumed", 0)) + 1
        else:
            finished = 0
            counts = dict.fromkeys(COUNT_KEYS, 0)
            total = sum(estimate_records(s) or 0 for s in specs)
            if given["chunk_size"] is None:
                params["chunk_size"] = auto_chunk_size(total, jobs)
            manifest = {
                "tool": "libconf annotate",
                "manifest_format": MANIFEST_FORMAT,
                "status": "running",
                "versions": _versions(),
                "parameters": params,
                "inputs": infos,
                "finished_chunks": 0,
                "counts": counts,
                "resumed": 0,
            }
        manifest_path = os.path.join(out_dir, MANIFEST)
        manifest["jobs"] = jobs
        manifest["scheduler"] = scheduler.scheduler.address if scheduler is not None else None
        manifest["counts"] = counts
        _write_json_atomic(manifest_path, manifest)
        fsync_dir(out_dir)

        options = AnalysisOptions(
            temperature=params["temperature"],
            medium=params["medium"],
            max_heavy_atoms=params["max_heavy_atoms"],
            max_stereo_assignments=params["max_stereo_assignments"],
            record_timeout=params["record_timeout"] or None,
        )
        if progress and total is None:
            total = sum(estimate_records(s) or 0 for s in specs)
        bar = _progress_bar(progress, total if progress else None)

        def todo() -> Iterator[tuple[int, list[Record]]]:
            for chunk, records in _chunks(specs, params["chunk_size"]):
                if chunk < finished:
                    if bar is not None:
                        bar.update(len(records))
                    continue
                yield chunk, records

        if scheduler is None:
            executor = _Executor(jobs, options, analyzer)
        else:
            executor = _DaskExecutor(scheduler, jobs, options, analyzer)
        try:
            results = contextlib.closing(executor.map(todo()))
            with results as ordered:
                for result in ordered:
                    _check_accounting(result)
                    for t in TABLES:
                        write_part(out_dir, t, result.chunk, result.tables[t])
                    for k in COUNT_KEYS:
                        counts[k] += int(result.counts.get(k, 0))
                    manifest["finished_chunks"] = result.chunk + 1
                    _write_json_atomic(manifest_path, manifest)
                    if bar is not None:
                        bar.update(result.counts["records"])
        finally:
            if bar is not None:
                bar.total = bar.n  # the estimate counted comment and blank lines too
                bar.close()

        manifest["status"] = "finished"
        manifest["input_stats"] = [
            {"name": s.input_file, "records": s.records, "skipped_lines": s.skipped_lines} for s in specs
        ]
        _write_json_atomic(manifest_path, manifest)
        fsync_dir(out_dir)
    finally:
        for path in spools:
            try:
                os.unlink(path)
            except OSError:
                pass

    wall = time.perf_counter() - start
    summary = dict(counts)
    summary.update(
        skipped_lines=sum(s.skipped_lines for s in specs),
        chunks=manifest["finished_chunks"],
        wall_time_s=round(wall, 3),
        records_per_s=round(counts["records"] / wall, 1) if wall > 0 else None,
        out_dir=out_dir,
        resumed=bool(manifest.get("resumed")),
        jobs=jobs,
    )
    return summary


def _check_accounting(result: ChunkResult) -> None:
    n_rows = result.tables["molecules"].num_rows + result.tables["errors"].num_rows
    if n_rows != result.counts["records"]:
        # A bug, not bad input: stop rather than write tables that break the contract.
        raise RuntimeError(
            f"chunk {result.chunk}: {result.counts['records']} records gave {n_rows} molecule/error rows"
        )


def format_summary(summary: dict) -> str:
    return (
        f"{summary['records']:,} records: {summary['molecules_with_rings']:,} molecules "
        f"with saturated six-membered rings, {summary['locked_scaffolds']:,} locked "
        f"scaffolds, {summary['errors']:,} errors; {summary['wall_time_s']:.1f} s "
        f"({summary['records_per_s'] or 0:,.0f} records/s) -> {summary['out_dir']}"
    )


__all__ = ["annotate", "format_summary", "DEFAULTS", "MEDIA", "part_name"]

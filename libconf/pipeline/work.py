"""What a worker process does with one chunk of records: analyse each, build the rows.

This is the only place the pipeline touches chemistry, and it does so through one
call per molecule (``libconf.engine.analyze``), with a time guard around it.
"""

from __future__ import annotations

import gc
import multiprocessing
import os
import signal
import threading
import time
from collections import Counter
from collections.abc import Callable, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field

from libconf.errors import InputError
from libconf.pipeline.readers import Record, truncate_raw
from libconf.pipeline.columns import MOLECULE_COLUMNS, TABLES, TableBuffer


@dataclass(frozen=True)
class AnalysisOptions:
    temperature: float
    medium: str
    max_heavy_atoms: int
    max_stereo_assignments: int
    record_timeout: float | None  # seconds; None or 0 = no guard


class RecordTimeout(BaseException):
    # BaseException, so that a broad ``except Exception`` inside the engine cannot
    # swallow the guard.
    pass


def _on_alarm(signum, frame):
    raise RecordTimeout()


#: Exit status of a worker process stopped by the watchdog (see ``hard_limit``).
HUNG_EXIT_STATUS = 75


def hard_limit(seconds: float) -> float:
    """When a record still runs after this long, its worker process is stopped."""
    return 2 * seconds + 2.0


class _Watchdog:
    """Stops this worker process when one record overruns its hard limit.

    SIGALRM (``time_guard``) interrupts Python code only: a single call stuck inside
    RDKit's C++ code never returns to Python to see it. The parent notices the worker's
    exit and records the record as an error. Armed only in worker processes.
    """

    def __init__(self) -> None:
        self.deadline: float | None = None
        self._thread: threading.Thread | None = None

    def arm(self, seconds: float) -> None:
        if self._thread is None:
            self._thread = threading.Thread(target=self._watch, daemon=True, name="libconf-watchdog")
            self._thread.start()
        self.deadline = time.monotonic() + hard_limit(seconds)

    def disarm(self) -> None:
        self.deadline = None

    def _watch(self) -> None:
        while True:
            time.sleep(0.25)
            deadline = self.deadline
            if deadline is not None and time.monotonic() > deadline:
                os._exit(HUNG_EXIT_STATUS)


_watchdog = _Watchdog()


def _in_worker_process() -> bool:
    return multiprocessing.parent_process() is not None


class _Clock:
    """The running record's deadline, read by the SIGALRM handler."""

    deadline: float | None = None


_clock = _Clock()
_handler_installed = False


def _on_tick(signum, frame):
    d = _clock.deadline
    if d is not None and time.monotonic() > d:
        _clock.deadline = None
        raise RecordTimeout()


def _guard_usable(seconds: float | None) -> bool:
    return bool(
        seconds
        and seconds > 0
        and hasattr(signal, "setitimer")
        and threading.current_thread() is threading.main_thread()
    )


@contextmanager
def chunk_guard(seconds: float | None):
    """Arm the record time guard for a run of records (main thread only).

    One interval timer ticks every ``seconds / 4`` (at most 0.25 s) for the whole chunk;
    each record only stores its deadline (a clock read), and the tick handler raises
    ``RecordTimeout`` once the running record is past it. Setting a timer per record
    cost more than a whole ring-free molecule. SIGALRM interrupts Python code only: a
    single long call inside RDKit's C++ code is interrupted when it returns to Python,
    so in a worker process a watchdog thread also ends the process at
    ``hard_limit(seconds)``. Yields whether the guard is armed.
    """
    if not _guard_usable(seconds):
        yield False
        return
    global _handler_installed
    # The handler is installed once per process and left in place (re-installing or
    # querying it costs more than analysing a small molecule).
    if not _handler_installed:
        signal.signal(signal.SIGALRM, _on_tick)
        _handler_installed = True
    tick = max(0.005, min(0.25, seconds / 4))
    signal.setitimer(signal.ITIMER_REAL, tick, tick)
    try:
        yield True
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        _clock.deadline = None


@contextmanager
def time_guard(seconds: float | None):
    """Interrupt the block after about ``seconds`` of wall time (one-off use)."""
    with chunk_guard(seconds) as armed:
        watchdog = armed and _in_worker_process()
        if armed:
            _clock.deadline = time.monotonic() + seconds
        if watchdog:
            _watchdog.arm(seconds)
        try:
            yield
        finally:
            _clock.deadline = None
            if watchdog:
                _watchdog.disarm()


def default_analyzer() -> Callable:
    from libconf.engine import analyze

    return analyze


def mol_from_molblock(text: str):
    """An RDKit Mol from one SDF entry, or InputError with a reason."""
    from rdkit import Chem, rdBase

    with rdBase.BlockLogs():
        mol = Chem.MolFromMolBlock(text)
        if mol is not None:
            return mol
        loose = Chem.MolFromMolBlock(text, sanitize=False, removeHs=False)
        if loose is None:
            raise InputError(
                "the molblock could not be read: its counts line, atom lines or bond lines are malformed",
                "parse",
            )
        problems = Chem.DetectChemistryProblems(loose)
    if problems:
        p = problems[0]
        kind = p.GetType()
        if kind == "AtomValenceException":
            idx = p.GetAtomIdx()
            sym = loose.GetAtomWithIdx(idx).GetSymbol()
            raise InputError(
                f"valence error on {sym}{idx + 1} (atom {idx + 1} of the molblock): {p.Message()}",
                "parse",
            )
        if kind == "KekulizeException":
            raise InputError(f"aromatic ring cannot be kekulized: {p.Message()}", "parse")
        raise InputError(f"the molecule is not valid chemistry: {p.Message()}", "parse")
    raise InputError("the molblock could not be turned into a molecule", "parse")


@dataclass
class ChunkResult:
    """One chunk's rows and counts.

    The rows travel as plain column lists and become Arrow tables on first use of
    ``tables`` (in the main process): pyarrow's conversion of a Python list imports
    pandas, which would add about a quarter of a second to every worker's start."""

    chunk: int
    columns: dict  # table name -> {column name: list of values}
    counts: dict
    _tables: dict | None = field(default=None, repr=False, compare=False)

    @property
    def tables(self) -> dict:
        """Table name -> pyarrow.Table with the table's explicit schema."""
        if self._tables is None:
            from libconf.pipeline.tables import columns_to_arrow  # main process only: pyarrow

            self._tables = {n: columns_to_arrow(n, c) for n, c in self.columns.items()}
        return self._tables

    def __getstate__(self):  # never ship the converted tables along with the lists
        state = dict(self.__dict__)
        state["_tables"] = None
        return state


def analyse_chunk(
    chunk: int,
    records: Sequence[Record],
    options: AnalysisOptions,
    analyzer: Callable | None = None,
) -> ChunkResult:
    """Analyse the records of one chunk, in order; never raises for a bad record."""
    analyze = analyzer or default_analyzer()
    buffers = {name: TableBuffer(name) for name in TABLES}
    counts: Counter = Counter()
    # No log blocking here: the engine reads RDKit's messages to word its reasons.
    with chunk_guard(options.record_timeout) as armed:
        guard = options.record_timeout if armed else None
        watchdog = armed and _in_worker_process()
        for rec in records:
            _analyse_record(rec, analyze, options, buffers, counts, guard, watchdog)
    counts["records"] = len(records)
    _freeze_once()
    return ChunkResult(chunk, {n: b.columns for n, b in buffers.items()}, dict(counts))


_frozen = False


def _freeze_once() -> None:
    """After this process's first chunk (engine, parameter tables and model loaded), move
    every object alive to the garbage collector's permanent generation: the collector's
    full passes then no longer walk the tables and trees on every pass (about 3 % of a
    worker's instructions on MOSES, counted with valgrind). Objects made later are
    collected as usual."""
    global _frozen
    if not _frozen:
        _frozen = True
        gc.freeze()


def _analyse_record(
    rec: Record, analyze, options: AnalysisOptions, buffers, counts, guard: float | None, watchdog: bool
) -> None:
    key = (rec.mol_id, rec.input_file, rec.input_row)

    def error(reason: str, stage: str) -> None:
        raw = rec.raw if rec.raw else truncate_raw(rec.text)
        buffers["errors"].append(key, {"reason": reason, "raw": raw, "stage": stage})
        counts["errors"] += 1
        counts[f"errors_{stage}"] += 1

    if rec.kind == "error":
        error(rec.reason, rec.stage)
        return
    try:
        if guard is not None:
            _clock.deadline = time.monotonic() + guard
            if watchdog:
                _watchdog.arm(guard)
        try:
            target = rec.text if rec.kind == "smiles" else mol_from_molblock(rec.text)
            result = analyze(
                target,
                temperature=options.temperature,
                medium=options.medium,
                max_heavy_atoms=options.max_heavy_atoms,
                max_stereo_assignments=options.max_stereo_assignments,
            )
            rows = _result_rows(result) if result.rings else None
        finally:
            # a tick that lands here still raises into the handlers below
            _clock.deadline = None
            if watchdog:
                _watchdog.disarm()
    except InputError as exc:
        stage = exc.stage if exc.stage in ("read", "parse", "analyse") else "analyse"
        error(exc.reason, stage)
        return
    except RecordTimeout:
        counts["timeouts"] += 1
        error(
            f"analysis took longer than {options.record_timeout:g} s and was stopped "
            "(raise --record-timeout to allow more)",
            "analyse",
        )
        return
    except MemoryError:
        error("analysis ran out of memory on this record", "analyse")
        return
    except RecursionError:
        error("the molecule is too deeply nested to analyse", "analyse")
        return
    except Exception as exc:  # an engine bug must not end the run; it is counted
        counts["internal_errors"] += 1
        error(
            f"internal error while analysing this record ({type(exc).__name__}: {exc}); "
            "please report it with the raw record",
            "analyse",
        )
        return
    if rows is None:
        # most records of a library: one row of constants besides SMILES and atom count
        buffers["molecules"].append_values(key, (result.smiles, result.n_heavy_atoms, *_no_ring_values(result)))
        counts["molecules"] += 1
        return
    mol_row, ring_rows, sub_rows = rows
    buffers["molecules"].append(key, mol_row)
    for r in ring_rows:
        buffers["rings"].append(key, r)
    for s in sub_rows:
        buffers["substituents"].append(key, s)
    counts["molecules"] += 1
    counts["rings"] += len(ring_rows)
    counts["substituents"] += len(sub_rows)
    if mol_row.get("n_sat6_rings"):
        counts["molecules_with_rings"] += 1
    if mol_row.get("locked_scaffold"):
        counts["locked_scaffolds"] += 1


_NO_RING_VALUES: tuple | None = None


def _no_ring_values(result) -> tuple:
    """The molecules-table values (after ``smiles`` and ``n_heavy_atoms``, in column
    order) that every molecule without a saturated six-membered ring shares; built once
    per process, since most records of a library take this path."""
    global _NO_RING_VALUES
    if _NO_RING_VALUES is None:
        row = result.molecule_row()
        _NO_RING_VALUES = tuple(row.get(c) for c in MOLECULE_COLUMNS[2:])
    return _NO_RING_VALUES


def _result_rows(result) -> tuple[dict, list[dict], list[dict]]:
    """Molecule, ring and substituent rows of a result with rings (ring-free results
    take `_no_ring_values`)."""
    mol_row = dict(result.molecule_row())
    mol_row["smiles"] = result.smiles
    mol_row["n_heavy_atoms"] = result.n_heavy_atoms
    ring_rows, sub_rows = [], []
    for ring in result.rings:
        ring_rows.append(ring.to_dict())
        for sub in ring.substituents:
            sub_rows.append(sub.to_dict())
    return mol_row, ring_rows, sub_rows

"""Small shared pieces of the resumable CSV writers in ``libconf.compute``."""

from __future__ import annotations

import csv
import math
from collections.abc import Callable
from pathlib import Path


def finite_float(x) -> float | None:
    """A CSV cell as a finite float, or None (blank, text, nan, inf)."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def finished_keys(out_path: Path, settings: str, key: Callable[[dict], str]) -> set[str]:
    """Keys of the rows already in ``out_path`` (empty when it does not exist); a file
    written with other settings is refused, so a resumed run never mixes settings."""
    done: set[str] = set()
    if out_path.exists():
        with open(out_path, newline="", encoding="utf-8") as fh:
            for r in csv.DictReader(fh):
                if r.get("settings") != settings:
                    raise SystemExit(
                        f"{out_path} was made with other settings ({r.get('settings')}); choose another --out"
                    )
                done.add(key(r))
    return done


def superseding_rows(paths, key: Callable[[dict], str] = lambda r: r["model_smiles"]) -> list[dict]:
    """Rows of one CSV file or several of one kind, newest first: a compound (``key``) is taken
    from the first file that has it, whatever its status there, so a re-computation with
    better settings replaces the older row and the older file still fills what it has not
    reached yet. Missing files are skipped."""
    if isinstance(paths, (str, Path)):
        paths = [paths]
    seen: set[str] = set()
    out: list[dict] = []
    for path in paths:
        path = Path(path)
        if not path.exists():
            continue
        with open(path, newline="", encoding="utf-8") as fh:
            mine = [r for r in csv.DictReader(fh) if key(r) not in seen]
        seen.update(key(r) for r in mine)
        out.extend(mine)
    return out

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

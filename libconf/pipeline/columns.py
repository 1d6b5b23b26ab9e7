"""Names of the four output tables and their columns, and the per-chunk column buffers.

Kept apart from `libconf.pipeline.tables` (the Arrow schemas and Parquet part files) so
that a worker process, which only fills column lists, never imports pyarrow (about 0.3 s
of CPU at every worker start).
"""

from __future__ import annotations

from libconf.results import MoleculeResult, RingResult, SubstituentResult

TABLES = ("molecules", "rings", "substituents", "errors")

#: The three columns every table starts with.
KEY_COLUMNS = ("mol_id", "input_file", "input_row")

#: Columns of each table after the three key columns, in order.
MOLECULE_COLUMNS = ("smiles", "n_heavy_atoms", *MoleculeResult.COLUMNS)
RING_COLUMNS = tuple(RingResult.COLUMNS)
SUBSTITUENT_COLUMNS = tuple(SubstituentResult.COLUMNS)
ERROR_COLUMNS = ("reason", "raw", "stage")
TABLE_COLUMNS = {
    "molecules": MOLECULE_COLUMNS,
    "rings": RING_COLUMNS,
    "substituents": SUBSTITUENT_COLUMNS,
    "errors": ERROR_COLUMNS,
}


class TableBuffer:
    """Column lists for one table of one chunk."""

    def __init__(self, name: str) -> None:
        self.name = name
        names = (*KEY_COLUMNS, *TABLE_COLUMNS[name])
        self.columns: dict[str, list] = {n: [] for n in names}
        self._value_columns = [(n, self.columns[n]) for n in names[3:]]
        self._key_columns = [self.columns[n] for n in names[:3]]

    def append(self, key: tuple[str, str, int], values: dict) -> None:
        for col, v in zip(self._key_columns, key):
            col.append(v)
        get = values.get
        for name, col in self._value_columns:
            col.append(get(name))

    def append_values(self, key: tuple[str, str, int], values: tuple) -> None:
        """Append one row given as the value columns' values, in schema order."""
        for col, v in zip(self._key_columns, key):
            col.append(v)
        for (_, col), v in zip(self._value_columns, values):
            col.append(v)

    def __len__(self) -> int:
        return len(self.columns["mol_id"])

    def to_arrow(self):
        from libconf.pipeline.tables import columns_to_arrow

        return columns_to_arrow(self.name, self.columns)

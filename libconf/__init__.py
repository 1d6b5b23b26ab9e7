"""libconf: ring-conformation descriptors for compound libraries.

For every saturated six-membered ring: the preferred chair and by how much,
axial/equatorial positions of substituents, the ring-inversion barrier and
rate, and whether the ring is held in one shape. Estimates from published
additive increments; they do not replace experiment.
"""

from .engine import DEFAULT_MEDIUM, DEFAULT_TEMPERATURE, MEDIA, analyze, parse_smiles
from .errors import InputError

__version__ = "0.1.0"

__all__ = [
    "analyze",
    "annotate",
    "annotate_frame",
    "parse_smiles",
    "InputError",
    "MEDIA",
    "DEFAULT_MEDIUM",
    "DEFAULT_TEMPERATURE",
    "__version__",
]


def annotate_frame(df, smiles_column="smiles", **options):
    """pandas in, molecules table out (one row per input row; see README)."""
    from .pipeline.frame import annotate_frame as _annotate_frame

    return _annotate_frame(df, smiles_column=smiles_column, **options)


def annotate(inputs, out_dir, **options):
    """Batch job: annotate compound files into Parquet tables (see README)."""
    from .pipeline.run import annotate as _annotate

    return _annotate(inputs, out_dir, **options)

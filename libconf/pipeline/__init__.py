"""Batch annotation of compound libraries: readers, chunked parallel run, Parquet tables."""

from libconf.pipeline.run import annotate

__all__ = ["annotate"]

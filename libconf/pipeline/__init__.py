"""Batch annotation of compound libraries: readers, chunked parallel run, Parquet tables."""

__all__ = ["annotate"]


def __getattr__(name):
    # Lazy: a worker process imports libconf.pipeline.work, which needs neither the run
    # machinery nor pyarrow (about 0.3 s of CPU at every worker start).
    if name == "annotate":
        from libconf.pipeline.run import annotate

        return annotate
    raise AttributeError(f"module 'libconf.pipeline' has no attribute {name!r}")

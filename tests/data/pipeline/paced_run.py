"""Run annotate with a paced analyzer (real engine plus a delay per record), for the
kill-and-resume test: python paced_run.py OUT INPUT [CHUNK_SIZE] [JOBS]."""

import sys

import paced_engine

from libconf.pipeline.run import annotate

if __name__ == "__main__":
    out, source = sys.argv[1], sys.argv[2]
    chunk = int(sys.argv[3]) if len(sys.argv) > 3 else 10
    jobs = int(sys.argv[4]) if len(sys.argv) > 4 else 2
    annotate([source], out, chunk_size=chunk, jobs=jobs, analyzer=paced_engine.paced)

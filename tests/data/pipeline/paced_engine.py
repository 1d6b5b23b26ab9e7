"""Stand-ins for libconf.engine.analyze used by the pipeline tests.

Each wraps the real engine; they only add delay, or a crash, on chosen records, to
exercise the pipeline's time guard, crash isolation and kill/resume.
"""

from __future__ import annotations

import os
import time

from libconf.engine import analyze as real_analyze

#: A record with this SMILES sleeps far longer than any test's --record-timeout.
SLOW_SMILES = "CC1CCC(C)CC1"
#: A record with this SMILES kills its worker process outright (as a native crash would).
CRASH_SMILES = "CCC1CCCCC1"


def slow_on_marked(target, **options):
    if target == SLOW_SMILES:
        time.sleep(120)
    return real_analyze(target, **options)


def crash_on_marked(target, **options):
    if target == CRASH_SMILES:
        os._exit(70)
    return real_analyze(target, **options)


def paced(target, **options):
    time.sleep(float(os.environ.get("LIBCONF_TEST_PACE_S", "0.01")))
    return real_analyze(target, **options)


#: A record with this SMILES interrupts the run (as Ctrl-C would) before it is analysed.
INTERRUPT_SMILES = "OC1CCCCC1"


def interrupt_on_marked(target, **options):
    if target == INTERRUPT_SMILES:
        raise KeyboardInterrupt
    return real_analyze(target, **options)


#: A record with this SMILES hangs where SIGALRM cannot reach it, as a long call inside
#: native code would.
HANG_SMILES = "CC1CCCC(C)C1"


def hang_on_marked(target, **options):
    if target == HANG_SMILES:
        import signal

        signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGALRM})
        time.sleep(120)
    return real_analyze(target, **options)

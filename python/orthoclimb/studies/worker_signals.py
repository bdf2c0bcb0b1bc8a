"""Imported by every worker process of the embedded cluster before it connects (Dask's worker
``preload``): the worker ignores SIGINT, so only the sweep reacts to Ctrl-C.

Ctrl-C in a terminal signals the whole process group (POSIX job control). The first workers
start with SIGINT blocked, inherited from the sweep while its cluster starts (see ``engine``);
ignoring it here discards one that is pending. A worker that Dask's nanny starts later to
replace a dead one is spawned while the sweep handles SIGINT again, and would die printing
tracebacks on the next Ctrl-C. Setting the disposition here, at import, covers both. The
worker is stopped by its nanny (SIGTERM or a message), never by SIGINT, so nothing is lost.
"""

from __future__ import annotations

import signal
import threading

if threading.current_thread() is threading.main_thread():  # signals: main thread only
    signal.signal(signal.SIGINT, signal.SIG_IGN)

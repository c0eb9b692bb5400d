"""Imported first by a ``processes`` engine's fork server, before numpy: BLAS on one thread.

OpenBLAS starts its threads, one per core less one, as it loads, and they spin for a while
waiting for work: in a 2-core process that imports numpy and scipy, 0.63 s of CPU against
0.36 s with ``OPENBLAS_NUM_THREADS=1`` (benchmarks/README.md). The fork server and every
worker forked from it paid that, although the workers run BLAS on one thread for their life
(:func:`slicer.pipeline.worker_processes.one_blas_thread`). Set here, in the server's own
environment, before its task modules load numpy, the libraries start on one thread; each
worker then takes the building process's environment (``start_worker``).

Listed only in the fork server's preload (:func:`slicer.pipeline.worker_processes.worker_context`);
importing it anywhere else changes that process's environment.
"""

from __future__ import annotations

import os

#: The thread counts BLAS libraries read as they load (OpenBLAS, and MKL where numpy uses it).
ONE_THREAD = {"OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}

os.environ.update(ONE_THREAD)

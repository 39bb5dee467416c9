"""Test-session set-up shared by every stage."""

import os

# Two cores, many small least-squares problems and worker processes: threaded BLAS only
# oversubscribes the machine (a 10 ms solve can stall for seconds). Set before numpy loads.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

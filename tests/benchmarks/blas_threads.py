"""``--threads N`` for benchmark scripts: set the BLAS thread variables before numpy loads.

Import this module (stdlib only) before numpy and call ``preset_threads(sys.argv[1:])``.
"""

from __future__ import annotations

import os


def preset_threads(argv) -> None:
    """Apply ``--threads N`` (or ``--threads=N``) to OpenBLAS / OpenMP / MKL."""
    for i, arg in enumerate(argv):
        value = arg.split("=", 1)[1] if arg.startswith("--threads=") else (
            argv[i + 1] if arg == "--threads" and i + 1 < len(argv) else None)
        if value is not None:
            for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
                os.environ[var] = value

"""pnbench: bench characterization of diodes.

The package root holds what every layer shares: the exception family (`pnbench.errors`)
and the installed version (`pnbench.version()`). The layers install beneath it as
`pnbench.modeling`, `pnbench.drivers`, `pnbench.sweeps` and `pnbench.tui`; see
docs/architecture.md.
"""

from __future__ import annotations

import os

#: The linear-algebra library (BLAS) numpy calls runs in this many threads, unless the
#: environment says otherwise. pnbench's matrices are a few parameters wide and its long
#: vectors take microseconds, so threads only cost: a threaded BLAS call keeps the
#: interpreter lock while its helpers wait for a core, which on a busy machine stalled
#: the acquisition thread for tens of milliseconds behind a fit's dot products (and the
#: spinning helpers burned the CPU a point needs). Set before numpy is first imported,
#: which the package root is (every ``pnbench.*`` import runs this first).
BLAS_THREADS = "1"
for _name in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, BLAS_THREADS)


def version() -> str:
    """The installed distribution's version, or "0+unknown" in a source tree without install."""
    from importlib import metadata

    try:
        return metadata.version("pnbench")
    except metadata.PackageNotFoundError:
        return "0+unknown"

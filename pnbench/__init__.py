"""pnbench: bench characterization of diodes.

The package root holds what every layer shares: the exception family (`pnbench.errors`)
and the installed version (`pnbench.version()`). The layers install beneath it as
`pnbench.modeling`, `pnbench.drivers`, `pnbench.sweeps` and `pnbench.tui`; see
docs/architecture.md.
"""

from __future__ import annotations


def version() -> str:
    """The installed distribution's version, or "0+unknown" in a source tree without install."""
    from importlib import metadata

    try:
        return metadata.version("pnbench")
    except metadata.PackageNotFoundError:
        return "0+unknown"

"""TOML text read one way for every file pnbench takes (plans, dialects, device files).

A syntax error and a document nested too deeply for the parser (a RecursionError inside
tomllib) both become the caller's BadInput subclass, with the file named and the shape a
file of that kind should have.
"""

from __future__ import annotations

import tomllib

from pnbench.errors import BadInput


def load_toml(text: str, error: type[BadInput], where: str, shape: str) -> dict:
    """Parse `text`; `where` prefixes every message ("plan my.toml"), `shape` says what
    the file should look like."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"{where}: not valid TOML: {exc}") from None
    except RecursionError:
        raise error(f"{where}: arrays or inline tables nested too deeply to read; "
                    f"{shape}") from None

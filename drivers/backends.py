"""Which VISA backend a plan's instrument is opened through, and who may choose it.

A plan is data that may come from someone else, so it may only name a backend that
loads no code of its choosing:

    (absent)            the user's VISA library if one is configured, else "@py"
    "@py"               pyvisa-py, the pure-Python backend (raw sockets, VXI-11, ...)
    "@ivi"              the user's VISA library if one is configured, else the one
                        pyvisa finds on its own (its standard search and ~/.pyvisarc)
    "@sim", "F.yaml@sim"  pyvisa-sim with its default or a named YAML file (data only)
    "DUT@pnsim[:time_scale=X]"  pnbench's own simulated bench (drivers.sim.backend)

A path to a VISA library (native code, loaded into this process) is chosen only by the
user, never by a plan: on the command line (``--visa-library PATH``), in the
environment (``PNBENCH_VISA_LIBRARY``) or in the user's configuration file
(``visa_library = "PATH"`` in ``$XDG_CONFIG_HOME/pnbench/config.toml``, by default
``~/.config/pnbench/config.toml``), in that order.
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

from pnbench.drivers.sim.backend import is_sim_backend
from pnbench.drivers.sim.backend import parse as parse_sim
from pnbench.errors import BadInput

ENV_VAR = "PNBENCH_VISA_LIBRARY"
#: Backends a plan may name as they are.
PLAN_BACKENDS = ("@py", "@ivi", "@sim")

_chosen: str | None = None  # --visa-library of this process's command line


def choose_visa_library(path: str | None) -> None:
    """The command line's choice (``--visa-library``); None leaves it to the user's
    environment and configuration."""
    global _chosen
    if path is not None and not str(path).strip():
        raise BadInput("--visa-library: empty; give the path of a VISA library")
    _chosen = str(path) if path is not None else None


def config_file() -> Path:
    base = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(base) / "pnbench" / "config.toml"


def user_visa_library() -> tuple[str, str] | None:
    """(library, where it was chosen) from the command line, the environment or the
    user's configuration file; None when the user chose none."""
    if _chosen is not None:
        return _chosen, "--visa-library"
    value = os.environ.get(ENV_VAR, "").strip()
    if value:
        return value, ENV_VAR
    path = config_file()
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError) as exc:
        raise BadInput(f"{path}: cannot read the pnbench configuration ({exc})") from None
    value = doc.get("visa_library")
    if value is None:
        return None
    if not isinstance(value, str) or not value.strip():
        raise BadInput(f"{path}: visa_library must be the path of a VISA library (text)")
    return value.strip(), str(path)


def plan_backend_problem(text: str) -> str | None:
    """Why a plan may not name ``text`` as its backend (None when it may)."""
    if text in PLAN_BACKENDS:
        return None
    if is_sim_backend(text):
        try:
            parse_sim(text)
        except BadInput as exc:
            return str(exc)
        return None
    if text.endswith("@sim") and text[: -len("@sim")].lower().endswith((".yaml", ".yml")):
        return None
    return (f"{text!r} is not a backend a plan may name ({', '.join(PLAN_BACKENDS)} or "
            "FILE.yaml@sim). A plan cannot choose a VISA library: that would load native "
            "code named by a file; choose the library on the command line "
            f"(--visa-library PATH), in {ENV_VAR} or in {config_file()} "
            "(visa_library = \"PATH\"), and write backend = \"@ivi\" or leave it out")


def resolve(plan_backend: str | None) -> str:
    """The pyvisa backend string for a plan's (allowed) backend."""
    if plan_backend in (None, "@ivi"):
        user = user_visa_library()
        if user is not None:
            return user[0]
        return "@py" if plan_backend is None else "@ivi"
    return plan_backend


def describe(backend: str) -> str:
    """A few words on what a resolved backend is, for `check` and the app."""
    if backend == "@py":
        return "pyvisa-py, pure Python"
    if backend == "@ivi":
        return "the VISA library pyvisa finds"
    if backend.endswith("@sim"):
        return "pyvisa-sim, simulated"
    if is_sim_backend(backend):
        spec = parse_sim(backend)
        return f"pnbench's simulated bench with {spec.device}, time scale {spec.time_scale:g}"
    user = user_visa_library()
    where = f" chosen by {user[1]}" if user is not None and user[0] == backend else ""
    return f"VISA library{where}"

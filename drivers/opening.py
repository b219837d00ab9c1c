"""Opening an instrument: the VISA backend, the resource, and the failures named.

`open_session` opens a resource through pyvisa (``@py`` pure-Python backend, a system VISA
library given by its path, or ``FILE.yaml@sim`` for pyvisa-sim; ``DEVICE@pnsim`` is the
in-process simulated bench) and returns a `drivers.session.Session`. A resource that is
not there is reported with the ones that are, and with a note on raw sockets, which no
backend lists.
"""

from __future__ import annotations

import contextlib
import warnings
from importlib import resources
from pathlib import Path

from pnbench.drivers.dialect import Dialect, load_dialect
from pnbench.drivers.session import Session
from pnbench.errors import BadInput, InstrumentError


def resolve_backend(backend: str) -> str:
    """The pyvisa library string for `backend`; a bare ``NAME.yaml@sim`` that is not a file
    here is looked up among the bundled pyvisa-sim files of `pnbench.sim_configs`."""
    if not backend.endswith("@sim") or backend == "@sim":
        return backend
    path = Path(backend[: -len("@sim")])
    if path.is_file():
        return f"{path}@sim"
    bundled = resources.files("pnbench.sim_configs")
    candidate = bundled / path.name
    if path.parent == Path(".") and candidate.is_file():
        return f"{candidate}@sim"
    names = sorted(p.name for p in bundled.iterdir() if p.name.endswith(".yaml"))
    raise BadInput(
        f"pyvisa-sim file {path}: no such file (give a path, or one of the bundled files: "
        f"{', '.join(names) or 'none'})"
    )


def list_visible(manager, query: str = "?*") -> list[str]:
    """Resource names the backend can see (raw socket resources are never listed)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return list(manager.list_resources(query))


def open_manager(backend: str = "@py"):
    """The pyvisa ResourceManager of `backend`; failures are InstrumentError or BadInput."""
    import pyvisa

    library = resolve_backend(backend)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return pyvisa.ResourceManager(library)
    except Exception as exc:  # noqa: BLE001 - pyvisa raises many kinds here
        detail = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InstrumentError(
            f"VISA backend {backend!r} could not be opened: {detail} (accepted: '@py', "
            "'@sim', 'FILE.yaml@sim', or the path of a VISA library)") from None


def open_session(
    resource: str,
    backend: str = "@py",
    timeout_ms: int = 2000,
    dialect: Dialect | None = None,
) -> Session:
    """Open `resource` on `backend` with the dialect's terminations and `timeout_ms`.
    A ``DEVICE@pnsim`` backend is the in-process simulated bench (drivers.sim.backend)."""
    dialect = dialect or load_dialect()
    if "@pnsim" in backend:
        from pnbench.drivers.sim.backend import open_sim_session

        return open_sim_session(resource, backend, timeout_ms, dialect)
    manager = open_manager(backend)
    if backend.endswith("@sim") and not _sim_knows(manager, resource):
        # pyvisa-sim hands out a dead session instead of failing: check first
        raise _not_there(manager, resource, backend, LookupError("no such resource"))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            handle = manager.open_resource(resource, open_timeout=timeout_ms)
    except Exception as exc:  # noqa: BLE001
        raise _not_there(manager, resource, backend, exc) from None
    try:
        handle.timeout = timeout_ms
        handle.read_termination = dialect.read_termination or None
        handle.write_termination = dialect.write_termination
    except Exception as exc:  # noqa: BLE001
        with contextlib.suppress(Exception):
            handle.close()
        raise InstrumentError(f"{resource}: cannot set terminations and timeout: {exc}") from None
    session = Session(handle, resource, dialect, backend)
    if session._socket is not None:
        try:
            session._socket.getpeername()
        except OSError:
            session.close()
            raise _not_there(manager, resource, backend,
                             ConnectionRefusedError("nothing accepted the connection")) from None
    return session


def _sim_knows(manager, resource: str) -> bool:
    from pyvisa import rname

    try:
        wanted = str(rname.parse_resource_name(resource))
    except rname.InvalidResourceName:
        return False
    return wanted in {str(rname.parse_resource_name(r)) for r in manager.list_resources("?*")}


def _not_there(manager, resource: str, backend: str, exc: BaseException) -> InstrumentError:
    reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    try:
        visible = list_visible(manager)
    except Exception:  # noqa: BLE001
        visible = []
    listed = ", ".join(visible) if visible else "none"
    hint = ""
    if not backend.endswith("@sim") and resource.upper().endswith("SOCKET"):
        hint = (" Raw TCP socket instruments (TCPIP::HOST::PORT::SOCKET) are never listed: "
                "check the address, the port and that the instrument is on.")
    return InstrumentError(
        f"{resource}: cannot open it through backend {backend!r} ({reason}). Resources "
        f"visible there: {listed}.{hint}")

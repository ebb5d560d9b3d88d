"""Running the same work on a Dask distributed cluster.

Every map, section and indication function builds a lazy dask graph when
the grid is dask-backed (opened with ``chunks=`` or ``lazy=True``), and
computes it with whatever scheduler dask is set to use. This module only
chooses that scheduler: :func:`use_scheduler` connects a
:class:`distributed.Client` to a running scheduler for the duration of a
``with`` block and closes it afterwards; nothing else in ndtmap knows about
clusters, and no state outlives the block beyond what dask itself keeps.
The command line's ``--scheduler ADDRESS`` option (commands ``map``,
``indications``, ``report``, ``convert``) calls :func:`use_scheduler`.

The workers read the grid themselves, so they must see its file under the
same path (a shared or local file system), and they must be able to import
ndtmap (the same version as the client).

Examples
--------
>>> with use_scheduler(None) as client:   # no address: dask's local threads, as without the block
...     client is None
True

On a cluster (not run here)::

    from ndtmap.cluster import use_scheduler
    with use_scheduler("tcp://10.0.0.5:8786"):
        grid = ndtmap.open_grid("KFP-FG-0317.zarr", lazy=True)
        amp = amplitude_map(grid, Gate("flaw", 5, 40)).compute()
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any
from urllib.parse import urlsplit

from ndtmap.errors import ParameterError, ParameterTypeError

__all__ = ["SCHEDULER_SCHEMES", "check_scheduler_address", "use_scheduler"]

#: Address schemes of a Dask distributed scheduler that ndtmap accepts.
SCHEDULER_SCHEMES = ("tcp", "tls", "ws", "wss", "inproc", "ucx")

_CONNECT_TIMEOUT_S = 10.0


def check_scheduler_address(address: Any) -> str:
    """Return `address` if it looks like a Dask scheduler address (``tcp://host:port``), else raise.

    Parameters
    ----------
    address : str
        The scheduler address, e.g. ``"tcp://10.0.0.5:8786"``.

    Raises
    ------
    ParameterTypeError
        `address` is not a string.
    ParameterError
        No ``scheme://host:port``, or a scheme Dask does not speak.

    Examples
    --------
    >>> check_scheduler_address("tcp://127.0.0.1:8786")
    'tcp://127.0.0.1:8786'
    >>> check_scheduler_address("127.0.0.1:8786")
    Traceback (most recent call last):
    ...
    ndtmap.errors.ParameterError: `scheduler` must be an address like tcp://host:8786, got '127.0.0.1:8786'
    """
    if not isinstance(address, str):
        raise ParameterTypeError(f"`scheduler` must be an address string like tcp://host:8786, got {address!r}")
    text = address.strip()
    parts = urlsplit(text)
    if "://" not in text or not parts.scheme:
        raise ParameterError(f"`scheduler` must be an address like tcp://host:8786, got {address!r}")
    if parts.scheme not in SCHEDULER_SCHEMES:
        raise ParameterError(
            f"`scheduler` must use one of the schemes {', '.join(SCHEDULER_SCHEMES)}, got {parts.scheme!r} "
            f"in {address!r}"
        )
    if parts.scheme != "inproc":
        try:
            port = parts.port
        except ValueError:
            port = None
        if not parts.hostname or port is None:
            raise ParameterError(f"`scheduler` must name a host and a port, like tcp://host:8786, got {address!r}")
    return text


@contextmanager
def use_scheduler(address: str | None, *, timeout_s: float = _CONNECT_TIMEOUT_S) -> Iterator[Any]:
    """Compute dask work inside the block on the distributed scheduler at `address`.

    Parameters
    ----------
    address : str or None
        ``tcp://host:port`` (or another Dask scheme) of a running
        ``dask scheduler`` / ``distributed.LocalCluster``. None or ``""``:
        leave dask as it is (local threads), so callers can pass an optional
        option straight through.
    timeout_s : float, default 10
        How long to try to reach the scheduler, s.

    Yields
    ------
    distributed.Client or None
        The client, the default scheduler of dask while the block runs; it
        is closed when the block ends (also on an error).

    Raises
    ------
    ParameterError
        A malformed address, or no scheduler answers there.
    """
    if address is None or (isinstance(address, str) and not address.strip()):
        yield None
        return
    text = check_scheduler_address(address)
    from distributed import Client

    try:
        client = Client(text, timeout=timeout_s, set_as_default=True)
    except (OSError, TimeoutError) as exc:
        raise ParameterError(
            f"`scheduler` {text} did not answer within {timeout_s:g} s ({type(exc).__name__}: {exc}); check the "
            "address and that the scheduler is running"
        ) from None
    try:
        yield client
    finally:
        client.close()

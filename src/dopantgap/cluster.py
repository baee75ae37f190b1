"""Sending the independent fits to a Dask cluster through joblib's Dask backend.

Optional: ``pip install "dopantgap[cluster]"``. Without a scheduler address the work
stays in local worker processes (``workers.worker_pool``).
"""

import os
from contextlib import contextmanager

from dopantgap.errors import DopantgapError

__all__ = ["SCHEDULER_VARIABLE", "active_address", "on_cluster", "scheduler_address"]

#: Environment variable read when no ``--scheduler`` is given.
SCHEDULER_VARIABLE = "DOPANTGAP_SCHEDULER"
# seconds to reach the scheduler before giving up (common practice, no source)
_CONNECT_SECONDS = 20

_active_address = None


def active_address():
    """The scheduler address work is being sent to, or None (local workers)."""
    return _active_address


def scheduler_address(address=None):
    """The address to use: ``address``, else ``$DOPANTGAP_SCHEDULER``, else None."""
    address = address or os.environ.get(SCHEDULER_VARIABLE, "").strip()
    return address or None


@contextmanager
def on_cluster(address=None):
    """Send every ``workers.worker_pool`` inside the block to the Dask scheduler at
    ``address`` (or ``$DOPANTGAP_SCHEDULER``); without either, do nothing.

    Parameters
    ----------
    address : str or None
        A Dask scheduler address, e.g. ``tcp://10.0.0.5:8786``.

    Yields
    ------
    str or None
        The address in use, or None when the work stays on this machine.

    Raises
    ------
    DopantgapError
        When Dask's ``distributed`` package is missing or the scheduler cannot be
        reached; the message says how to fix it.
    """
    global _active_address
    address = scheduler_address(address)
    if address is None:
        yield None
        return
    try:
        from distributed import Client
        from distributed.comm import parse_address
        from distributed.comm.registry import get_backend
        from joblib import parallel_config
    except ImportError as error:
        raise DopantgapError(
            f"A Dask scheduler was given ({address}) but Dask's distributed package is not "
            f"installed: pip install \"dopantgap[cluster]\", or leave out --scheduler "
            f"(and unset {SCHEDULER_VARIABLE}) to run on this machine."
        ) from error
    try:
        # a scheme Dask does not know is refused here: refused inside Client(), it
        # left a half-made client whose clean-up printed a traceback and hung 40 s
        get_backend(parse_address(address)[0])
        client = Client(address, timeout=_CONNECT_SECONDS, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as error:
        raise DopantgapError(
            f"Could not reach the Dask scheduler at {address} ({error}). Check the address "
            f"(e.g. tcp://HOST:8786) and that the scheduler and its workers run, or leave "
            f"out --scheduler (and unset {SCHEDULER_VARIABLE}) to run on this machine."
        ) from error
    previous = _active_address
    try:
        with client, parallel_config(backend="dask", client=client):
            _active_address = address
            yield address
    finally:
        _active_address = previous

"""Surface tiles on a Dask distributed cluster (SPEC 2.14).

The cluster runs :func:`hydroatlas.interp.grid.predict_tile`, the same pure tile function as this process and
the local process pool, so the answers are the same. The fitted model goes to every worker once
(``Client.scatter(..., broadcast=True)``); each task then carries only the grid, its rows and its mask. At most
``in_flight`` tiles are out at a time and each is handed back as it finishes, so the client holds a bounded
number of tiles whatever the size of the grid.

Every worker needs hydroatlas (the same version) and its dependencies installed: the tasks refer to the tile
function and the model classes by name. dask and distributed are optional packages (``pip install
'hydroatlas[dask]'``); nothing here imports them until a scheduler is asked for.

Connecting waits at most Dask's own ``distributed.comm.timeouts.connect`` (30 s unless configured, e.g.
``DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT=5s``).
"""

from __future__ import annotations

import socket
from contextlib import contextmanager
from pathlib import Path

from ..errors import HydroatlasError, ParameterError

#: what a scheduler argument may be, for messages
SCHEDULER_FORMS = ("an address such as tcp://HOST:8786, or the JSON scheduler file a scheduler wrote "
                   "(dask scheduler --scheduler-file FILE)")
#: seconds to wait for the first worker of a cluster that has none yet
WORKER_WAIT_S = 30.0


def _distributed():
    try:
        import distributed
    except ImportError:
        raise ParameterError("scheduler= needs the optional packages dask and distributed; install them with "
                             "pip install 'hydroatlas[dask]'", param="scheduler") from None
    return distributed


def _connect_timeout_s() -> float:
    import dask.config
    from dask.utils import parse_timedelta

    return float(parse_timedelta(dask.config.get("distributed.comm.timeouts.connect"), default="s"))


def connect(scheduler: str):
    """A ``distributed.Client`` connected to ``scheduler`` (an address or a scheduler file).

    Raises ParameterError, naming ``scheduler=``, when the value is no address, no scheduler answers there
    within Dask's connect timeout, or dask and distributed are not installed. The caller closes the client.
    """
    dist = _distributed()
    if not isinstance(scheduler, str) or not scheduler.strip():
        raise ParameterError(f"scheduler= must be {SCHEDULER_FORMS}; got {scheduler!r}", param="scheduler")
    text = scheduler.strip()
    timeout = _connect_timeout_s()
    kwargs = {}
    if text.lower().endswith(".json") or Path(text).is_file():
        address = _address_in_file(text)
        kwargs["scheduler_file"] = text
    else:
        address = text
    _check_reachable(address, timeout)
    try:
        return dist.Client(None if kwargs else address, timeout=timeout, set_as_default=False, **kwargs)
    except (OSError, ValueError, TimeoutError) as exc:
        raise ParameterError(f"cannot connect to the Dask scheduler at {address} ({exc}); check scheduler=",
                             param="scheduler") from None


def _address_in_file(path: str) -> str:
    import json

    try:
        address = json.loads(Path(path).read_text(encoding="utf-8")).get("address")
    except FileNotFoundError:
        raise ParameterError(f"no scheduler file at {path} (scheduler=)", param="scheduler") from None
    except (OSError, ValueError, AttributeError) as exc:
        raise ParameterError(f"the scheduler file {path} cannot be read as a Dask scheduler file ({exc}); "
                             "check scheduler=", param="scheduler") from None
    if not isinstance(address, str) or not address:
        raise ParameterError(f"the scheduler file {path} names no address; check scheduler=", param="scheduler")
    return address


def _check_reachable(address: str, timeout: float) -> None:
    """A clear, quick refusal of an address nothing listens on (before a Client waits out its timeout)."""
    from distributed.comm import parse_address, parse_host_port
    from distributed.comm.registry import backends

    try:
        scheme, location = parse_address(address)
    except ValueError as exc:
        raise ParameterError(f"scheduler= {address!r} is not a Dask address ({exc}); give {SCHEDULER_FORMS}",
                             param="scheduler") from None
    if scheme not in backends:
        raise ParameterError(f"scheduler= {address!r} has the unknown scheme {scheme!r} (known: "
                             f"{', '.join(sorted(backends))}); give {SCHEDULER_FORMS}", param="scheduler")
    if scheme not in ("tcp", "tls"):
        return
    try:
        host, port = parse_host_port(location)
    except ValueError as exc:
        raise ParameterError(f"scheduler= {address!r} is not a Dask address ({exc}); give {SCHEDULER_FORMS}",
                             param="scheduler") from None
    try:
        with socket.create_connection((host, int(port)), timeout=timeout):
            pass
    except OSError as exc:
        if isinstance(exc, ConnectionRefusedError):
            why = "connection refused"
        elif isinstance(exc, (TimeoutError, socket.timeout)):
            why = f"no answer within {timeout:g} s"
        elif isinstance(exc, socket.gaierror):
            why = f"unknown host {host!r}"
        else:
            why = exc.strerror or str(exc)
        raise ParameterError(f"no Dask scheduler answers at {address} ({why}); check scheduler= and that the "
                             "scheduler is running", param="scheduler") from None


@contextmanager
def connected(scheduler):
    """Yield a client for ``scheduler``: a ``distributed.Client`` as it is, else :func:`connect` (closed after)."""
    dist = _distributed()
    if isinstance(scheduler, dist.Client):
        yield scheduler
        return
    client = connect(scheduler)
    try:
        yield client
    finally:
        client.close()


def cluster_tiles(scheduler, model, grid, jobs, tile_mask, has_std: bool, *, in_flight: int | None = None):
    """Run :func:`~hydroatlas.interp.grid.predict_tile` for each (row0, row1) of ``jobs`` on a Dask cluster.

    Yields ``(row0, row1, estimate, std)`` as tiles finish (any order). ``tile_mask(row0, row1)`` runs here,
    once per tile, as the tile is handed out. See :func:`hydroatlas.interp.grid.iter_tiles`.
    """
    _distributed()  # refuse before the first tile is asked for
    return _cluster_tiles(scheduler, model, grid, jobs, tile_mask, has_std, in_flight)


def _cluster_tiles(scheduler, model, grid, jobs, tile_mask, has_std, in_flight):
    import uuid

    dist = _distributed()
    from .grid import predict_tile

    with connected(scheduler) as client:
        threads = sum(client.nthreads().values())
        if threads == 0:
            try:
                client.wait_for_workers(1, timeout=WORKER_WAIT_S)
            except (TimeoutError, OSError):
                raise ParameterError(f"the Dask cluster at {client.scheduler.address} has no worker "
                                     f"(waited {WORKER_WAIT_S:g} s); start workers or check scheduler=",
                                     param="scheduler") from None
            threads = sum(client.nthreads().values())
        try:
            [model_ref] = client.scatter([model], broadcast=True, hash=False)
        except Exception as exc:  # noqa: BLE001 - a worker's error comes back as a bare Exception
            _raise_if_not_installed(exc, "the model could not be sent to the workers")
            raise
        limit = in_flight or max(2, 2 * threads)
        run = uuid.uuid4().hex[:12]
        where = {}
        done = dist.as_completed(loop=client.loop)
        todo = iter(jobs)

        def hand_out() -> None:
            for r0, r1 in todo:
                fut = client.submit(predict_tile, model_ref, grid, r0, r1, tile_mask(r0, r1), has_std,
                                    key=f"hydroatlas-tile-{run}-{r0}", pure=False, retries=1)
                where[fut.key] = (r0, r1)
                done.add(fut)
                return

        try:
            for _ in range(limit):
                hand_out()
            for fut in done:
                r0, r1 = where.pop(fut.key)
                try:
                    est, std = fut.result()
                except Exception as exc:  # noqa: BLE001
                    _raise_if_not_installed(exc, f"a Dask worker could not run the tile of rows {r0}-{r1}")
                    raise
                fut.release()
                hand_out()
                yield r0, r1, est, std
        finally:
            left = list(done.futures)  # tiles not yet finished when the caller stopped early or a tile failed
            done.clear()
            if left:
                client.cancel(left)
            model_ref.release()


def _raise_if_not_installed(exc: Exception, what: str) -> None:
    """A worker that cannot load hydroatlas's code: one clear error instead of the worker's traceback."""
    text = f"{type(exc).__name__}: {exc}"
    if isinstance(exc, (ImportError, AttributeError)) or "No module named" in text or "ModuleNotFoundError" in text:
        raise HydroatlasError(f"{what} ({text}); every worker needs hydroatlas installed, the same version as "
                              "here") from None

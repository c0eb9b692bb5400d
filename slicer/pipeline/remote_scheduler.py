"""Whether a dask scheduler answers at an address, asked in a bounded wait.

:class:`slicer.pipeline.engine.Engine` asks before it connects (``--scheduler tcp://...``):
dask's own handshake has no bound of its own.
"""

from __future__ import annotations

import concurrent.futures
import threading

from slicer.core.errors import SettingsError


def ask_scheduler(address: str, timeout: float) -> None:
    """Check that a dask scheduler answers at ``address``, waiting at most ``timeout + 5`` s.

    Runs dask.distributed's own connection (which retries for ``timeout`` seconds) and its
    ``identity`` call, bounded as a whole by ``asyncio.wait_for`` at ``timeout + 2`` s, on an
    event loop of its own in a daemon thread (the caller may be inside a running loop, e.g. a
    notebook). The thread is waited for 3 s more and then left behind: closing its loop also
    waits for a host-name lookup, which only the system's resolver bounds.

    Raises
    ------
    SettingsError
        Nothing listens there (or the host is unknown), something listens that does not
        answer as dask in time or at all, or it is a dask worker rather than a scheduler.
    """
    import asyncio

    from distributed.core import rpc

    async def identity() -> dict:
        async with rpc(address, timeout=timeout) as scheduler:
            return await scheduler.identity()

    answer: concurrent.futures.Future = concurrent.futures.Future()

    def ask() -> None:
        try:
            answer.set_result(asyncio.run(asyncio.wait_for(identity(), timeout + 2)))
        except BaseException as exc:  # noqa: BLE001 - handed to the caller's thread
            answer.set_exception(exc)

    def refuse(why: str) -> SettingsError:
        return SettingsError(f"cannot reach the dask scheduler at {address}: {why}",
                             where="--scheduler")

    threading.Thread(target=ask, name="slicer-connect", daemon=True).start()
    try:
        info = answer.result(timeout + 5)
    except TimeoutError:
        if not answer.done():  # the lookup of the host name hangs
            raise refuse(f"no answer within {timeout + 5:g} s") from None
        # connected, then no reply (dask's own timeout on connecting ends in an OSError)
        raise refuse(f"something listens there but did not answer as dask within "
                     f"{timeout + 2:g} s") from None
    except OSError as exc:
        detail, cause = "", exc.__cause__
        while cause is not None:  # the last attempt's error: refused, unknown host...
            if isinstance(cause, OSError) and not isinstance(cause, TimeoutError):
                detail = f" ({one_line(cause)})"
            cause = cause.__cause__
        raise refuse(f"nothing answered within {timeout:g} s{detail}") from None
    except Exception:  # noqa: BLE001 - whatever a server that is not dask sends
        raise refuse("something listens there but does not speak dask") from None
    kind = info.get("type") if isinstance(info, dict) else None
    if kind != "Scheduler":
        raise refuse(f"it is a dask {kind or 'server'}, not a scheduler")


def one_line(exc: BaseException) -> str:
    """An exception's message on one line, at most 200 characters."""
    text = " ".join(str(exc).split()) or type(exc).__name__
    return text if len(text) <= 200 else text[:197] + "..."


__all__ = ["ask_scheduler", "one_line"]

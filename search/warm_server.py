"""The engine, warmed once in the local workers' fork server: imported for its effect.

The fork server of :mod:`search.worker_start` imports this module once, before
it forks any worker: the import limits the thread pools to one thread and
trains and evaluates the warm-up network (:func:`search.unit.warm_up`), so
that the server holds NumPy, Numba, Numba's first-use machinery and the
kernels' machine code, which every worker forked from it shares. Then it
moves every object made so far out of the collector's reach (``gc.freeze``, as
the Python documentation of the ``gc`` module advises before a fork without
exec): the workers' collections do not walk (and so do not copy) the server's
long-lived objects, and the server's own last collection at its exit is
short. Unlike every
other module of the package, importing this one does work; nothing but the
fork server imports it.
"""

from __future__ import annotations


def _warm() -> None:
    import gc

    from search.executors import limit_threads
    limit_threads()
    try:
        from search.unit import warm_up
        warm_up()
    except Exception:  # noqa: BLE001 - each worker warms up again and reports its own failure
        pass
    gc.freeze()


_warm()

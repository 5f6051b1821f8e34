"""Where the fit's pass over its files runs: the engines by name.

An engine is any object with ``moments(paths, settings)`` returning
(per-fold moments, rows left out, data hash) for the files in order, from
the blocks of :mod:`affix.fit.blocks`; every engine gives the same result.
"""
from __future__ import annotations

from affix.errors import UsageError
from affix.progress import no_bar

ENGINES = ("local", "dask")


def named(name: str, scheduler=None, bar=no_bar, scheduler_parameter: str = "scheduler"):
    """The engine called ``name``: "local", or "dask" on the cluster at ``scheduler``
    (an address; None: a cluster of this machine's CPUs; its errors call it
    ``scheduler_parameter``), showing its progress with ``bar`` (see :mod:`affix.progress`)."""
    check_named(name, scheduler)
    if name != "dask":
        return engine_for(name)
    from affix.fit.dask_engine import DaskEngine

    return DaskEngine(scheduler, bar=bar, scheduler_parameter=scheduler_parameter)


def check_named(name: str, scheduler=None) -> None:
    """UsageError unless ``name`` is an engine and ``scheduler`` is given only for Dask."""
    if name not in ENGINES:
        raise UsageError(f"must be one of {', '.join(map(repr, ENGINES))}, got {name!r}", parameter="engine")
    if scheduler is not None and name != "dask":
        raise UsageError("names a Dask scheduler, which only the dask engine uses", parameter="scheduler")


def engine_for(engine):
    """The engine an ``engine`` argument names: "local", "dask" (a cluster on this machine), or an engine object."""
    if engine == "local":
        from affix.fit.passes import LocalEngine

        return LocalEngine()
    if engine == "dask":
        from affix.fit.dask_engine import DaskEngine

        return DaskEngine()
    if isinstance(engine, str) or not callable(getattr(engine, "moments", None)):
        raise UsageError(f"must be one of {', '.join(map(repr, ENGINES))} or an engine object, got {engine!r}",
                         parameter="engine")
    return engine

"""Run many studies: serially, on a local process pool, or on a Dask distributed cluster.

Options whose soil, geometry, discretisation and map are equal (``solve_key``) are sent together as
one task and share one solve and one surface map; only the fault data, criteria and surface layer
differ between them, which scale the fields or change the limits. Every path runs the same code on the
same data, so results are identical to a serial run.
"""

from __future__ import annotations

from typing import Callable, Sequence

from ..case.model import Case
from ..errors import GroundingError
from ..study.conditions import solve_geometry, solve_key
from ..study.pipeline import run_study
from ..study.result import StudyResult

Progress = Callable[[int, int], None]


def group_by_geometry(cases: Sequence[Case]) -> list[list[int]]:
    """Indices of the cases, grouped by equal geometry key, in first-seen order."""
    groups: dict = {}
    for i, c in enumerate(cases):
        groups.setdefault(solve_key(c), []).append(i)
    return list(groups.values())


def run_group(cases: Sequence[Case], estimate_error: bool = True) -> list[StudyResult]:
    """Studies of cases that share one geometry: one solve, then one cheap finish per case."""
    unit = solve_geometry(cases[0], estimate_error=estimate_error)
    return [run_study(c, unit=unit, uncertainty=False) for c in cases]


def run_options(cases: Sequence[Case], workers: int = 1, cluster: str | None = None,
                progress: Progress | None = None, estimate_error: bool = True) -> list[StudyResult]:
    """Study every case, results in the order given.

    Parameters
    ----------
    cases : sequence of Case
        The options.
    workers : int
        Local worker processes (1 = in this process).
    cluster : str, optional
        Address of an existing Dask distributed scheduler (e.g. ``tcp://10.0.0.5:8786``); needs the
        ``cluster`` extra.
    progress : callable, optional
        Called as progress(done, total) as options finish.
    estimate_error : bool
        Also estimate each geometry's discretisation error.
    """
    groups = group_by_geometry(cases)
    results: list[StudyResult | None] = [None] * len(cases)
    done = 0

    def collect(idx, res):
        nonlocal done
        for i, r in zip(idx, res):
            results[i] = r
        done += len(idx)
        if progress:
            progress(done, len(cases))

    if cluster:
        _run_dask(cluster, cases, groups, collect, estimate_error)
    elif workers > 1 and len(groups) > 1:
        from concurrent.futures import ProcessPoolExecutor, as_completed

        with ProcessPoolExecutor(max_workers=workers) as pool:
            futures = {pool.submit(run_group, [cases[i] for i in g], estimate_error): g for g in groups}
            for f in as_completed(futures):
                collect(futures[f], f.result())
    else:
        for g in groups:
            collect(g, run_group([cases[i] for i in g], estimate_error))
    return results  # type: ignore[return-value]


def _run_dask(address, cases, groups, collect, estimate_error):
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise GroundingError("--cluster needs Dask: pip install 'grounding[cluster]'") from None
    try:
        client = Client(address, timeout="10s") if isinstance(address, str) else Client(address)
    except (OSError, TimeoutError) as exc:
        raise GroundingError(f"cannot reach the Dask scheduler at {address} ({exc}); check the address") from None
    try:
        futures = [client.submit(run_group, [cases[i] for i in g], estimate_error, pure=False) for g in groups]
        index = {f.key: g for f, g in zip(futures, groups)}
        for f in as_completed(futures):
            collect(index[f.key], f.result())
    finally:
        if isinstance(address, str):
            client.close()

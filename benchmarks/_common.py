"""Helpers shared by the benchmark scripts: command line, BLAS thread limit, run facts, output.

Each script imports this module as ``_common`` (its own folder is first on ``sys.path`` when it
runs as ``python benchmarks/<name>.py``, from any working directory) or, when imported as
``benchmarks.<name>`` from the repository root, as ``benchmarks._common``.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import platform
import sys
import time
from collections.abc import Callable
from typing import Any

import numpy as np


def parser(doc: str | None) -> argparse.ArgumentParser:
    """An argument parser with the options every script takes: ``--json`` and ``--threads``."""
    ap = argparse.ArgumentParser(description=(doc or "").split("\n")[0])
    ap.add_argument("--json", action="store_true", help="also print one JSON object last")
    ap.add_argument(
        "--threads", type=int, default=None, help="limit BLAS threads to N (threadpoolctl)"
    )
    return ap


def thread_limit(threads: int | None) -> contextlib.AbstractContextManager[Any]:
    """Limit the BLAS threads of every loaded library to ``threads`` (no limit when None).

    threadpoolctl limits only libraries already loaded: import numpy, scipy.linalg (and
    statsmodels) before entering the context.
    """
    if not threads:
        return contextlib.nullcontext()
    from threadpoolctl import threadpool_limits

    return threadpool_limits(threads)


def blas_line(blas: list[dict[str, Any]]) -> str:
    """The loaded BLAS libraries (from :func:`blas_info`) on one line of a report."""
    return "BLAS (threadpoolctl): " + "; ".join(
        f"{d['internal_api']} {d['version']} {d.get('architecture')} threads={d['num_threads']}"
        f" ({d['prefix']})"
        for d in blas
    )


def blas_info() -> list[dict[str, Any]]:
    """The BLAS libraries loaded in this process with their thread counts (threadpoolctl)."""
    from threadpoolctl import threadpool_info

    keep = ("user_api", "internal_api", "num_threads", "version", "architecture", "prefix")
    return [{k: d.get(k) for k in keep} for d in threadpool_info()]


def versions(threads: int | None) -> dict[str, Any]:
    """Library versions, the thread limit, the OpenBLAS variables and the CPU count."""
    import scipy
    import statsmodels

    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "statsmodels": statsmodels.__version__,
        "threads": threads or "none (library default)",
        "env": {k: os.environ.get(k, "unset") for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")},
        "cpu_count": os.cpu_count(),
    }


def machine() -> dict[str, Any]:
    """The loaded BLAS, the Python version, the machine, CPU count and load average."""
    return {
        "blas": blas_info(),
        "python": sys.version.split()[0],
        "machine": platform.machine(),
        "cpus": os.cpu_count(),
        "load_average": os.getloadavg()[0] if hasattr(os, "getloadavg") else None,
    }


def interleaved(
    fns: dict[str, Callable[[], Any]],
    rounds: int,
    inner: dict[str, int] | None = None,
    warmup: int = 2,
) -> dict:
    """Time callables round robin: each round runs every callable ``inner[name]`` times (1 by
    default), each call timed on its own.  Returns every time and the medians (seconds)."""
    inner = inner or {}
    for f in fns.values():
        for _ in range(warmup):
            f()
    times: dict[str, list[float]] = {name: [] for name in fns}
    for _ in range(rounds):
        for name, f in fns.items():
            for _ in range(inner.get(name, 1)):
                t0 = time.perf_counter()
                f()
                times[name].append(time.perf_counter() - t0)
    median = {k: float(np.median(v)) for k, v in times.items()}
    return {"median": median, "times": times, "inner": inner}


def ratio(res: dict, num: str, den: str) -> float:
    """Ratio of the median times (the headline figure)."""
    return res["median"][num] / res["median"][den]


def paired_ratio(res: dict, num: str, den: str) -> float:
    """Median over rounds of time[num] / time[den], each from the first call of the round:
    a second view that cancels slow drifts of the machine's load."""
    t, inner = res["times"], res["inner"]
    first_num = np.array(t[num])[:: inner.get(num, 1)]
    first_den = np.array(t[den])[:: inner.get(den, 1)]
    return float(np.median(first_num / first_den))


def emit(text: str, res: dict[str, Any], as_json: bool) -> None:
    """Print the report, then (``as_json``) the figures as one JSON object on the last line."""
    print(text)
    if as_json:
        print(json.dumps(res, sort_keys=True))


def scaled_main(
    doc: str | None,
    run: Callable[[float], dict[str, Any]],
    report: Callable[[dict[str, Any]], str],
    argv: list[str] | None,
) -> int:
    """The command line of the statsmodels-referenced scripts: ``--json``, ``--threads`` and
    ``--repeats`` (a scale); the report and the figures with the loaded BLAS and versions."""
    ap = parser(doc)
    ap.add_argument(
        "--repeats", type=float, default=1.0, help="scale the number of repeats (default 1)"
    )
    args = ap.parse_args(argv)

    # load every BLAS before limiting threads: threadpoolctl limits only loaded libraries
    import scipy.linalg  # noqa: F401
    import statsmodels.api  # noqa: F401

    import lincomb  # noqa: F401

    with thread_limit(args.threads):
        res = run(args.repeats)
        res["blas"] = blas_info()
    res.update(versions(args.threads))
    emit(report(res), res, args.json)
    return 0


def rounds_main(
    doc: str | None,
    run: Callable[[int], dict[str, Any]],
    report: Callable[[dict[str, Any]], str],
    rounds: int,
    argv: list[str] | None,
) -> int:
    """The command line of the scripts timed in interleaved rounds: ``--json``, ``--threads``
    and ``--rounds`` (default ``rounds``); the figures gain the loaded BLAS, the thread
    setting and the 1-minute load average before and after the run."""
    ap = parser(doc)
    ap.add_argument(
        "--rounds", type=int, default=rounds, help=f"interleaved rounds (default {rounds})"
    )
    args = ap.parse_args(argv)

    # load every BLAS before limiting threads: threadpoolctl limits only loaded libraries
    import scipy.linalg  # noqa: F401

    import lincomb  # noqa: F401

    load = os.getloadavg()[0]
    with thread_limit(args.threads):
        res = run(args.rounds)
        res["blas"] = blas_info()
    res["threads"] = args.threads or "default"
    res["load_average"] = load
    res["load_average_after"] = os.getloadavg()[0]
    emit(report(res), res, args.json)
    return 0

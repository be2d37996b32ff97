"""Timing and peak-memory helpers shared by the benchmark steps and the runner."""

from __future__ import annotations

import json
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path
from types import TracebackType
from typing import Any

Result = dict[str, Any]  # numbers, and a 'note' text where a step was skipped


class Clock:
    """Wall and CPU seconds of a ``with`` block (CPU counts every thread of the process)."""

    wall: float = 0.0
    cpu: float = 0.0

    def __enter__(self) -> Clock:
        self._t = time.perf_counter()
        self._c = time.process_time()
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.wall = time.perf_counter() - self._t
        self.cpu = time.process_time() - self._c


def peak_rss_mb() -> float:
    """Peak resident set size of this process so far, in MB (Linux reports KB)."""
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / 1024.0 if sys.platform != "darwin" else peak / 2**20


def run_child(step: str, params: dict[str, Any], timeout: float = 3600.0) -> Result:
    """Run one step in a fresh interpreter so its peak memory is its own."""
    cmd = [sys.executable, "-m", "benchmarks.steps", step, json.dumps(params)]
    root = Path(__file__).resolve().parent.parent
    proc = subprocess.run(
        cmd, cwd=root, capture_output=True, text=True, timeout=timeout, env=os.environ.copy()
    )
    if proc.returncode != 0:
        raise RuntimeError(f"step {step} failed:\n{proc.stderr[-4000:]}")
    last = proc.stdout.strip().splitlines()[-1]
    result: Result = json.loads(last)
    return result


def median_of(runs: list[Result]) -> Result:
    """Per key: the median over runs; peak memory: the largest."""
    keys = [k for k in runs[0] if all(k in r for r in runs)]
    out: Result = {}
    for k in keys:
        values = [r[k] for r in runs]
        if not all(isinstance(v, int | float) for v in values):
            out[k] = values[0]
        elif k == "peak_rss_mb":
            out[k] = max(values)
        else:
            out[k] = statistics.median(values)
            if k.endswith("_s") and len(values) > 1:
                out[f"{k} runs"] = [float(v) for v in values]
    out["runs"] = float(len(runs))
    return out

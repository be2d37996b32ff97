"""The national-scale benchmark script runs end to end (tiny size, steps in one process).

Only that it runs and reports coherent numbers; the timings themselves live in
docs/performance.md, never in tests.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow  # about 5 s: a subprocess running every step once
def test_benchmark_script_runs_end_to_end(tmp_path: Path) -> None:
    out = tmp_path / "bench.json"
    cmd = [
        sys.executable,
        "-m",
        "benchmarks.run",
        "--cases",
        "2000",
        "--repeats",
        "1",
        "--inline",
        "--bootstrap-refits",
        "30",
        "--agree-rows",
        "1500",
        "--agree-cases",
        "300",
        "--ledger-appends",
        "30",
        "--verify-entries",
        "300",
        "--workdir",
        str(tmp_path),
        "--out",
        str(out),
    ]
    proc = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "| whole suite (fit_suite, encoding included) |" in proc.stdout
    result = json.loads(out.read_text())
    size = result["sizes"]["2000"]
    for step in ("load_closecall", "load_pandas", "suite", "plain_fit", "fit_study", "queue"):
        assert size[step]["time_s" if "time_s" in size[step] else "rank_s"] > 0, step
    assert size["fit_study"]["cases"] > 0
    # the stored band and the one recomputed from scratch are the same numbers
    assert size["bands"]["scratch_vs_stored_max_rel_diff"] < 1e-6
    # the closed form and the bootstrap measure the same spread (delta method vs resampling):
    # their ratio sits near 1 even with 30 refits
    assert 0.7 < size["bootstrap"]["sd_over_se_median"] < 1.4
    ledger = result["ledger"]
    assert ledger["plain_read_rows"] == 300 and ledger["append_per_s"] > 0
    summary = result["summary"]
    assert summary["suite_over_plain_fit"] > 0 and "peak_rss_gb" in summary

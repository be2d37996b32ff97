"""closecall.core.numbers.logit against SciPy's ``scipy.special.logit`` (the reference
library): equal to the bit, so thresholds on the log-odds scale are what they were when they
came from SciPy. And the start-up of ``closecall queue`` imports neither SciPy's special
functions for it nor pandas (they cost about 0.6 s of the start-up; docs/performance.md)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
from scipy.special import logit as scipy_logit

from closecall.core.numbers import logit


def test_logit_equals_scipy_to_the_bit() -> None:
    rng = np.random.default_rng(20261204)
    grid = np.concatenate(
        [
            rng.uniform(0.0, 1.0, 100_000),
            np.linspace(1e-6, 1 - 1e-6, 20_001),
            [
                0.3,
                0.65,
                0.5,
                1 / 3,
                2 / 3,
                0.2,
                0.8,
                0.05,
                0.95,
                np.nextafter(0.3, 0),
                0.65 + 1e-16,
            ],
        ]
    )
    mine = np.array([logit(float(p)) for p in grid])
    assert np.array_equal(mine, scipy_logit(grid))


def test_the_queue_modules_import_neither_pandas_nor_scipy_special() -> None:
    code = (
        "import sys; import closecall.api.study, closecall.review.queue, "
        "closecall.suite.snapshot, closecall.analysis.dependence; "
        "print(sorted(m for m in ('pandas', 'scipy.special') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"

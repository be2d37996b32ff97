"""Range checks for numbers given to engine functions (command-line options, API arguments).

The config file's numbers are checked by ``closecall.setup.config.number`` against the ranges
of docs/config.md; a number that arrives another way (a band, epsilon, seed, bootstrap count
or row count, from the command line or the library) is checked here, by the engine function
that uses it, so that NaN, infinity, a negative count or a seed NumPy cannot take is refused
with the valid range rather than turned into a table of wrong numbers or a traceback. Each
check names the engine's parameter; the CLI words it as its flag (closecall.cli.errors).
"""

from __future__ import annotations

import math
import numbers

import numpy as np

from closecall.core.errors import Fix, UserError

SEED_MAX = 2**32 - 1  # NumPy's and scikit-learn's seeded generators take 0 .. 2**32 - 1
REPLICATES_MAX = 1_000_000  # bootstrap replicates: far above any useful count, below memory


def _num(x: float) -> str:
    return f"{int(x)}" if float(x).is_integer() else f"{x:g}"


def range_text(
    low: float | None,
    high: float | None,
    *,
    low_open: bool = False,
    high_open: bool = False,
    whole: bool = False,
) -> str:
    """The range in words, e.g. 'a finite number > 0' or 'a whole number from 0 to 9'."""
    kind = "a whole number" if whole else "a finite number"
    if low is not None and high is not None and not low_open and not high_open:
        return f"{kind} from {_num(low)} to {_num(high)}"
    parts = []
    if low is not None:
        parts.append(f"{'>' if low_open else '≥'} {_num(low)}")
    if high is not None:
        parts.append(f"{'<' if high_open else '≤'} {_num(high)}")
    return f"{kind} {' and '.join(parts)}".rstrip()


def check_number(
    name: str,
    value: object,
    low: float | None = None,
    high: float | None = None,
    *,
    low_open: bool = False,
    high_open: bool = False,
    whole: bool = False,
    example: str | None = None,
) -> float:
    """``value`` as a float when it is a finite number in the range; UserError otherwise.

    Parameters
    ----------
    name : the engine's name of the parameter, e.g. ``band`` (each view names it its own way:
        the CLI as its flag)
    value : the value given
    low, high : the bounds (None: open-ended); ``low_open`` / ``high_open`` exclude them
    whole : an integer is required
    example : a valid value for the fix (default: none shown)
    """
    rng = range_text(low, high, low_open=low_open, high_open=high_open, whole=whole)
    is_number = isinstance(value, numbers.Real) and not isinstance(value, (bool, np.bool_))
    if not is_number:
        what = "is not a number"
    elif not math.isfinite(float(value)):  # type: ignore[arg-type]
        what = "is not a finite number"
    elif whole and not float(value).is_integer():  # type: ignore[arg-type]
        what = "is not a whole number"
    else:
        x = float(value)  # type: ignore[arg-type]
        below = low is not None and (x <= low if low_open else x < low)
        above = high is not None and (x >= high if high_open else x > high)
        if not below and not above:
            return x
        what = "is out of range"
    shown = value if not isinstance(value, str) else repr(value)
    raise UserError(
        f"{shown} {what}: it must be {rng}", Fix(name, range=rng, example=example), about=name
    )


def check_seed(name: str, value: object) -> int:
    """A seed NumPy's generators take (a whole number from 0 to 2**32 − 1)."""
    return int(check_number(name, value, 0, SEED_MAX, whole=True, example="7"))


def check_count(
    name: str, value: object, low: int, high: int | None = None, example: str | None = None
) -> int:
    """A whole count ≥ ``low`` (and ≤ ``high``)."""
    return int(check_number(name, value, low, high, whole=True, example=example))


def logit(p: float) -> float:
    """The log-odds ``log(p / (1 - p))`` of a probability in (0, 1), computed as SciPy's
    ``scipy.special.logit`` does (SciPy 1.17: the plain formula away from 1/2, and
    ``log1p(s) - log1p(-s)`` with ``s = 2 (p - 1/2)`` for 0.3 <= p <= 0.65, where the plain one
    loses digits), so thresholds match it to the bit without importing ``scipy.special``
    (a fifth of a second at every start of ``closecall queue``)."""
    if p < 0.3 or p > 0.65:
        return math.log(p / (1.0 - p))
    s = 2.0 * (p - 0.5)
    return math.log1p(s) - math.log1p(-s)

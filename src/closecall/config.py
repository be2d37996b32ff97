"""Study configuration: `closecall.toml` parsed into typed, validated objects.

Every key is documented in docs/config.md. Unknown keys are refused with the nearest valid key
suggested; relative paths are resolved against the folder that holds the config file.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from closecall.errors import UserError

CONFIG_NAME = "closecall.toml"

MODEL_NAMES = ("pooled", "unaware", "proxy_free", "split", "deployed")
DEFAULT_REASONS = (
    "information-not-in-model",
    "data-error",
    "hardship-or-circumstance",
    "model-limitation",
    "policy-exception",
    "other",
)


@dataclass(frozen=True)
class CostLens:
    """A pair of error costs and the threshold they imply (Elkan 2001).

    The favourable decision is taken iff p > t with
    t = cost_false_favourable / (cost_false_favourable + cost_false_unfavourable).
    """

    name: str
    cost_false_favourable: float
    cost_false_unfavourable: float

    @property
    def threshold(self) -> float:
        return self.cost_false_favourable / (
            self.cost_false_favourable + self.cost_false_unfavourable
        )


@dataclass(frozen=True)
class DataConfig:
    history: Path
    pending: Path | None
    id: str
    outcome: str
    favourable: str | int | float | bool
    group: tuple[str, ...]
    features: tuple[str, ...] | None  # None: every other column
    exclude: tuple[str, ...] = ()
    kinds: dict[str, str] = field(default_factory=dict)  # feature -> numeric|categorical
    deployed_score: str | None = None  # probability column in the pending file
    min_group_cases: int = 30


@dataclass(frozen=True)
class ModelConfig:
    penalty: float = (
        1.0  # lambda in sum(loss) + lambda/2 * |w|^2 over standardised features; 0 = off
    )
    folds: int = 5
    reference: str = "pooled"  # pooled or deployed


@dataclass(frozen=True)
class ProxyConfig:
    association: float = 0.3  # association with the group at or above this ...
    influence: float = 0.02  # ... and influence share at or above this make a proxy
    extra: tuple[str, ...] = ()  # features always treated as proxies
    never: tuple[str, ...] = ()  # features never treated as proxies


@dataclass(frozen=True)
class MultiplicityConfig:
    epsilon: float = 0.001  # equally-good set: total loss within (1 + epsilon) of the best
    neighbours: int = 5


@dataclass(frozen=True)
class ReviewConfig:
    band: float = 0.5  # |margin| at or below this (log-odds) makes a close call
    reasons: tuple[str, ...] = DEFAULT_REASONS
    reviewers: tuple[str, ...] = ()  # logins who may record; empty = anyone
    analysts: tuple[str, ...] = ()  # logins who may read and export
    ledger: Path = Path("ledger.sqlite")
    claim_minutes: float = 30.0


@dataclass(frozen=True)
class StudyConfig:
    """A whole study: where the data is, how to model it, how reviews are kept."""

    path: Path  # the config file itself
    name: str
    seed: int
    data: DataConfig
    model: ModelConfig
    lenses: tuple[CostLens, ...]
    proxies: ProxyConfig
    multiplicity: MultiplicityConfig
    review: ReviewConfig

    @property
    def root(self) -> Path:
        return self.path.parent

    @property
    def workdir(self) -> Path:
        """Where snapshots and caches live."""
        return self.root / ".closecall"

    @property
    def cross_fitted(self) -> bool:
        return self.data.pending is None

    def digest(self) -> str:
        """A stable hash of everything that changes the fitted results."""
        d = asdict(self)
        d.pop("path")
        d.pop("review")  # review settings don't change the fit
        # the data files' bytes are hashed into the snapshot id; where the study folder lives
        # must not matter, so a copied or moved study keeps its snapshot id
        d["data"]["history"] = self.data.history.name
        d["data"]["pending"] = self.data.pending.name if self.data.pending else None
        return hashlib.sha256(json.dumps(d, sort_keys=True, default=str).encode()).hexdigest()


# --------------------------------------------------------------------------- parsing

_SCHEMA: dict[str, dict[str, type | tuple[type, ...]]] = {
    "study": {"name": str, "seed": int},
    "data": {
        "history": str,
        "pending": str,
        "id": str,
        "outcome": str,
        "favourable": (str, int, float, bool),
        "group": (str, list),
        "features": list,
        "exclude": list,
        "deployed_score": str,
        "min_group_cases": int,
    },
    "kinds": {},  # free keys: feature names
    "model": {"penalty": (int, float), "folds": int, "reference": str},
    "lens": {
        "name": str,
        "cost_false_favourable": (int, float),
        "cost_false_unfavourable": (int, float),
    },
    "proxies": {
        "association": (int, float),
        "influence": (int, float),
        "extra": list,
        "never": list,
    },
    "multiplicity": {"epsilon": (int, float), "neighbours": int},
    "review": {
        "band": (int, float),
        "reasons": list,
        "reviewers": list,
        "analysts": list,
        "ledger": str,
        "claim_minutes": (int, float),
    },
}


def _suggest(key: str, valid: list[str]) -> str:
    close = difflib.get_close_matches(key, valid, n=1, cutoff=0.5)
    return f"did you mean '{close[0]}'?" if close else f"valid keys: {', '.join(sorted(valid))}"


def _check_keys(path: Path, section: str, table: dict[str, Any]) -> None:
    schema = _SCHEMA[section]
    for key, value in table.items():
        if key not in schema:
            raise UserError(
                f"{path}: unknown key '{key}' in [{section}]",
                f"{_suggest(key, list(schema))}; see docs/config.md",
            )
        expected = schema[key]
        if not isinstance(value, expected) or (isinstance(value, bool) and expected in (int,)):
            names = (
                " or ".join(t.__name__ for t in expected)
                if isinstance(expected, tuple)
                else expected.__name__
            )
            raise UserError(
                f"{path}: key '{key}' in [{section}] should be {names}, got {value!r}",
                "correct the value in the config file",
            )


def _str_tuple(path: Path, section: str, key: str, value: Any) -> tuple[str, ...]:
    if isinstance(value, str):
        return (value,)
    if not all(isinstance(v, str) for v in value):
        raise UserError(f"{path}: [{section}] {key} must list column names as strings")
    return tuple(value)


def load_config(path: str | Path) -> StudyConfig:
    """Read and validate a study config file."""
    path = Path(path)
    if path.is_dir():
        path = path / CONFIG_NAME
    if not path.exists():
        raise UserError(
            f"{path}: no study config here",
            "run 'closecall init DATA' to write one, or pass --config PATH",
        )
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{path}: TOML syntax error: {exc}", "fix the line named above") from None
    except UnicodeDecodeError:
        raise UserError(f"{path}: not UTF-8 text", "save the config as UTF-8") from None
    return parse_config(raw, path.resolve())


def parse_config(raw: dict[str, Any], path: Path) -> StudyConfig:
    """Turn a parsed TOML document into a StudyConfig, validating every key."""
    sections = {*_SCHEMA.keys()}
    for key in raw:
        if key not in sections:
            raise UserError(
                f"{path}: unknown section [{key}]",
                f"{_suggest(key, sorted(sections))}; see docs/config.md",
            )
    root = path.parent

    study = raw.get("study", {})
    _check_keys(path, "study", study)
    d = raw.get("data")
    if not isinstance(d, dict):
        raise UserError(f"{path}: missing section [data]", "add [data] with history, id, outcome")
    _check_keys(path, "data", d)
    for required in ("history", "id", "outcome", "favourable", "group"):
        if required not in d:
            raise UserError(
                f"{path}: [data] needs '{required}'",
                "see docs/config.md; 'closecall init DATA' writes a starting config",
            )
    kinds = raw.get("kinds", {})
    for feat, kind in kinds.items():
        if kind not in ("numeric", "categorical"):
            raise UserError(
                f"{path}: [kinds] {feat} = {kind!r}", "each kind must be 'numeric' or 'categorical'"
            )
    group = _str_tuple(path, "data", "group", d["group"])
    if not group:
        raise UserError(f"{path}: [data] group is empty", "name the group attribute column(s)")
    data = DataConfig(
        history=(root / d["history"]),
        pending=(root / d["pending"]) if d.get("pending") else None,
        id=d["id"],
        outcome=d["outcome"],
        favourable=d["favourable"],
        group=group,
        features=_str_tuple(path, "data", "features", d["features"]) if "features" in d else None,
        exclude=_str_tuple(path, "data", "exclude", d.get("exclude", [])),
        kinds=dict(kinds),
        deployed_score=d.get("deployed_score"),
        min_group_cases=int(d.get("min_group_cases", 30)),
    )
    if data.min_group_cases < 2:
        raise UserError(f"{path}: [data] min_group_cases must be at least 2")

    m = raw.get("model", {})
    _check_keys(path, "model", m)
    model = ModelConfig(
        penalty=float(m.get("penalty", 1.0)),
        folds=int(m.get("folds", 5)),
        reference=m.get("reference", "pooled"),
    )
    if model.penalty < 0:
        raise UserError(f"{path}: [model] penalty must be >= 0 (0 turns it off)")
    if model.folds < 2:
        raise UserError(f"{path}: [model] folds must be at least 2")
    if model.reference not in ("pooled", "deployed"):
        raise UserError(f"{path}: [model] reference must be 'pooled' or 'deployed'")
    if model.reference == "deployed" and not data.deployed_score:
        raise UserError(
            f"{path}: [model] reference = 'deployed' but [data] names no deployed_score",
            "add deployed_score = COLUMN under [data], or set reference = 'pooled'",
        )

    lens_raw = raw.get("lens", [{"name": "equal-costs"}])
    if isinstance(lens_raw, dict):
        lens_raw = [lens_raw]
    lenses: list[CostLens] = []
    for entry in lens_raw:
        _check_keys(path, "lens", entry)
        lens = CostLens(
            name=str(entry.get("name", f"lens{len(lenses) + 1}")),
            cost_false_favourable=float(entry.get("cost_false_favourable", 1.0)),
            cost_false_unfavourable=float(entry.get("cost_false_unfavourable", 1.0)),
        )
        if lens.cost_false_favourable <= 0 or lens.cost_false_unfavourable <= 0:
            raise UserError(f"{path}: [[lens]] '{lens.name}': both costs must be positive")
        lenses.append(lens)
    if len({lens.name for lens in lenses}) != len(lenses):
        raise UserError(f"{path}: two [[lens]] entries share a name", "give each lens its own name")

    p = raw.get("proxies", {})
    _check_keys(path, "proxies", p)
    proxies = ProxyConfig(
        association=float(p.get("association", 0.3)),
        influence=float(p.get("influence", 0.02)),
        extra=_str_tuple(path, "proxies", "extra", p.get("extra", [])),
        never=_str_tuple(path, "proxies", "never", p.get("never", [])),
    )

    mu = raw.get("multiplicity", {})
    _check_keys(path, "multiplicity", mu)
    multiplicity = MultiplicityConfig(
        epsilon=float(mu.get("epsilon", 0.001)), neighbours=int(mu.get("neighbours", 5))
    )
    if multiplicity.epsilon <= 0:
        raise UserError(f"{path}: [multiplicity] epsilon must be positive")

    r = raw.get("review", {})
    _check_keys(path, "review", r)
    review = ReviewConfig(
        band=float(r.get("band", 0.5)),
        reasons=_str_tuple(path, "review", "reasons", r.get("reasons", list(DEFAULT_REASONS))),
        reviewers=_str_tuple(path, "review", "reviewers", r.get("reviewers", [])),
        analysts=_str_tuple(path, "review", "analysts", r.get("analysts", [])),
        ledger=root / r.get("ledger", "ledger.sqlite"),
        claim_minutes=float(r.get("claim_minutes", 30.0)),
    )
    if review.band < 0:
        raise UserError(f"{path}: [review] band must be >= 0")

    return StudyConfig(
        path=path,
        name=str(study.get("name", path.parent.name)),
        seed=int(study.get("seed", 0)),
        data=data,
        model=model,
        lenses=tuple(lenses),
        proxies=proxies,
        multiplicity=multiplicity,
        review=review,
    )

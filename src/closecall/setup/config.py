"""Study configuration: `closecall.toml` parsed into typed, validated objects.

Every key is documented in docs/config.md. Unknown keys are refused with the nearest valid key
suggested; relative paths are resolved against the folder that holds the config file.
"""

from __future__ import annotations

import base64
import binascii
import difflib
import hashlib
import json
import math
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from closecall.core.errors import Fix, UserError
from closecall.core.shared import adopt_study_folder

CONFIG_NAME = "closecall.toml"

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
    #: the ledger file, or (text) a PostgreSQL database's URL or conninfo, never with a password
    ledger: Path | str = Path("ledger.sqlite")
    claim_minutes: float = 30.0


@dataclass(frozen=True)
class DeployedConfig:
    """[deployed]: the model in use as a scorecard (docs/scorecard.md)."""

    scorecard: Path | None = None  # a CSV or TOML card; None: no card
    #: SHA-256 of the card file's bytes when the config was read (a changed card changes the
    #: snapshot id); None when the file could not be read (fitting then names the problem)
    scorecard_digest: str | None = None


@dataclass(frozen=True)
class TeamConfig:
    """A team sharing the study on one server (docs/team.md)."""

    #: login -> base64 Ed25519 public key; when any is set, new entries must be signed
    keys: dict[str, str] = field(default_factory=dict)
    #: file holding the ledger head the supervisor recorded (``closecall ledger anchor``);
    #: verify checks the chain still holds it whenever the file is there
    anchor: Path | None = None


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
    team: TeamConfig = field(default_factory=TeamConfig)
    deployed: DeployedConfig = field(default_factory=DeployedConfig)

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
        d.pop("team")
        # the data files' bytes are hashed into the snapshot id; where the study folder lives
        # must not matter, so a copied or moved study keeps its snapshot id
        d["data"]["history"] = self.data.history.name
        d["data"]["pending"] = self.data.pending.name if self.data.pending else None
        if self.deployed.scorecard is None:
            d.pop("deployed")  # studies without a card keep their snapshot id
        else:
            d["deployed"]["scorecard"] = self.deployed.scorecard.name
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
    "team": {"keys": dict, "anchor": str},
    "deployed": {"scorecard": str},
}


SEED_MAX = 2**32 - 1  # NumPy's and scikit-learn's seeded generators take 0 .. 2**32 - 1
EPSILON_MAX = 0.1  # the top of the ambiguity curve `closecall bands` shows (docs/methods.md)
NEIGHBOURS_MAX = 100  # explain lists them one per line
CLAIM_MINUTES_MAX = 7 * 24 * 60  # a week: a longer soft claim only hides a stale one


@dataclass(frozen=True)
class Range:
    """The valid values of one numeric config key.

    ``low`` / ``high`` are the bounds (None: open-ended), ``low_open`` / ``high_open`` say
    whether a bound itself is excluded, and ``whole`` asks for an integer.
    """

    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    whole: bool = False

    def text(self) -> str:
        """The range in words, e.g. 'a finite number > 0' or 'a whole number from 2 to 9'."""
        kind = "a whole number" if self.whole else "a finite number"
        lo, hi = self.low, self.high
        if lo is not None and hi is not None and not self.low_open and not self.high_open:
            return f"{kind} from {_num(lo)} to {_num(hi)}"
        if lo is not None and hi is not None:
            left = ">" if self.low_open else "≥"
            right = "<" if self.high_open else "≤"
            return f"{kind} {left} {_num(lo)} and {right} {_num(hi)}"
        if lo is not None:
            return f"{kind} {'>' if self.low_open else '≥'} {_num(lo)}"
        if hi is not None:
            return f"{kind} {'<' if self.high_open else '≤'} {_num(hi)}"
        return kind

    def holds(self, value: float) -> bool:
        """Whether a finite value lies in the range."""
        if self.low is not None and (value <= self.low if self.low_open else value < self.low):
            return False
        return not (
            self.high is not None and (value >= self.high if self.high_open else value > self.high)
        )


def _num(x: float) -> str:
    return f"{int(x):,}".replace(",", "") if float(x).is_integer() else f"{x:g}"


# every numeric key: its valid range and, for the fix, what the value means
RANGES: dict[tuple[str, str], tuple[Range, str]] = {
    ("study", "seed"): (Range(0, SEED_MAX, whole=True), "the seed of every random step"),
    ("data", "min_group_cases"): (Range(2, whole=True), "the smallest group level allowed"),
    ("model", "penalty"): (Range(0), "0 turns the penalty off"),
    ("model", "folds"): (Range(2, whole=True), "K of the K-fold cross-fitting"),
    ("lens", "cost_false_favourable"): (Range(0, low_open=True), "costs are relative"),
    ("lens", "cost_false_unfavourable"): (Range(0, low_open=True), "costs are relative"),
    ("proxies", "association"): (Range(0, 1), "Cramér's V or 2·|AUC − 0.5|, both 0 to 1"),
    ("proxies", "influence"): (Range(0, 1), "a share of the margin variance, 0 to 1"),
    ("multiplicity", "epsilon"): (
        Range(0, EPSILON_MAX, low_open=True),
        "a share of the best loss; 0.001 is 0.1 %",
    ),
    ("multiplicity", "neighbours"): (
        Range(1, NEIGHBOURS_MAX, whole=True),
        "how many similar history cases explain lists",
    ),
    ("review", "band"): (Range(0, low_open=True), "|margin| in log-odds; 0.5 is the default"),
    ("review", "claim_minutes"): (
        Range(0, CLAIM_MINUTES_MAX, low_open=True),
        "how long a soft claim lasts",
    ),
}


def toml_text(value: object) -> str:
    """A config value as it would be written in TOML (for messages)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, float):
        return "nan" if math.isnan(value) else repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


def number(path: Path, section: str, key: str, value: object, where: str = "") -> float:
    """A numeric config value checked against its range (``RANGES``); refused otherwise.

    ``where`` names the section in messages when it is not ``[section]`` (a lens: ``[[lens]]
    'name'``).

    Booleans, text, NaN and infinity are refused as well as values out of range; the message
    names the file, the section and key, the value given and the valid range.
    """
    rng, meaning = RANGES[(section, key)]
    label = f"{where or f'[{section}]'} {key}"
    is_number = isinstance(value, (int, float)) and not isinstance(value, bool)
    ok = (
        is_number
        and math.isfinite(float(value))  # type: ignore[arg-type]
        and (isinstance(value, int) or not rng.whole)
        and rng.holds(float(value))  # type: ignore[arg-type]
    )
    if not ok:
        if not is_number:
            what = "is not a number"
        elif not math.isfinite(float(value)):  # type: ignore[arg-type]
            what = "is not a finite number"
        elif rng.whole and not isinstance(value, int):
            what = "is not a whole number"
        else:
            what = "is out of range"
        raise UserError(
            f"{path}: {label} = {toml_text(value)} {what}: it must be {rng.text()}",
            f"set {label} to {rng.text()} ({meaning}); see docs/config.md",
        )
    return float(value)  # type: ignore[arg-type]


def whole(path: Path, section: str, key: str, value: object, where: str = "") -> int:
    """An integer config value checked like :func:`number`."""
    number(path, section, key, value, where)
    return int(value)  # type: ignore[call-overload]


def _suggest(key: str, valid: list[str]) -> str:
    close = difflib.get_close_matches(key, valid, n=1, cutoff=0.5)
    return f"did you mean '{close[0]}'?" if close else f"valid keys: {', '.join(sorted(valid))}"


def _check_keys(path: Path, section: str, table: dict[str, Any], label: str = "") -> None:
    """Refuse unknown keys and values of the wrong type (numbers are checked by ``number``)."""
    schema = _SCHEMA[section]
    label = label or f"[{section}]"
    for key, value in table.items():
        if key not in schema:
            raise UserError(
                f"{path}: unknown key '{key}' in {label}",
                f"{_suggest(key, list(schema))}; see docs/config.md",
            )
        if (section, key) in RANGES:
            continue
        expected = schema[key]
        allowed = expected if isinstance(expected, tuple) else (expected,)
        if not isinstance(value, allowed) or (isinstance(value, bool) and bool not in allowed):
            names = " or ".join("text" if t is str else t.__name__ for t in allowed)
            raise UserError(
                f"{path}: {label} {key} = {toml_text(value)} should be {names}",
                "correct the value in the config file; see docs/config.md",
            )


def _table(path: Path, raw: dict[str, Any], section: str) -> dict[str, Any]:
    """A section of the document, which must be a table (absent: empty)."""
    value = raw.get(section, {})
    if not isinstance(value, dict):
        raise UserError(
            f"{path}: [{section}] should be a table of keys, got {toml_text(value)}",
            f"write it as a [{section}] section; see docs/config.md",
        )
    return value


def _str_tuple(path: Path, section: str, key: str, value: Any) -> tuple[str, ...]:
    if isinstance(value, str):
        return (value,)
    bad = [v for v in value if not isinstance(v, str)]
    if bad:
        raise UserError(
            f"{path}: [{section}] {key} lists {toml_text(bad[0])}, which is not a column name",
            f'write every entry of {key} as text in quotes, e.g. {key} = ["income"]',
        )
    return tuple(value)


def load_config(path: str | Path) -> StudyConfig:
    """Read and validate a study config file."""
    path = Path(path)
    if path.is_dir():
        path = path / CONFIG_NAME
    if not path.exists():
        raise UserError(
            f"{path}: no study config here",
            Fix(
                "config",
                range="the path of a study config",
                hint="to write one, run 'closecall init DATA'",
            ),
        )
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{path}: TOML syntax error: {exc}", "fix the line named above") from None
    except UnicodeDecodeError:
        raise UserError(f"{path}: not UTF-8 text", "save the config as UTF-8") from None
    adopt_study_folder(path.resolve().parent)  # what a command creates follows the folder
    return parse_config(raw, path.resolve())


def parse_config(raw: dict[str, Any], path: Path) -> StudyConfig:
    """Turn a parsed TOML document into a StudyConfig, validating every key.

    Every number is checked against its range (``RANGES``, stated in docs/config.md), and the
    columns the config names are checked against each other (each plays one part). Checks
    that need the data (columns exist, folds against the class counts) are made when the data
    is loaded (:func:`closecall.setup.load.load_study_data`).
    """
    sections = {*_SCHEMA.keys()}
    for key in raw:
        if key not in sections:
            raise UserError(
                f"{path}: unknown section [{key}]",
                f"{_suggest(key, sorted(sections))}; see docs/config.md",
            )
    root = path.parent
    study = _table(path, raw, "study")
    _check_keys(path, "study", study)
    data = _data_config(path, raw)
    model = _model_config(path, raw)
    lenses = _lenses(path, raw.get("lens", [{"name": "equal-costs"}]))
    proxies = _proxy_config(path, raw)
    _check_parts(path, data, proxies)
    deployed = _deployed(path, raw, data)
    if model.reference == "deployed" and not data.deployed_score and not deployed.scorecard:
        raise UserError(
            f"{path}: [model] reference = 'deployed' but [data] names no deployed_score and "
            "[deployed] no scorecard",
            "add deployed_score = COLUMN under [data] or scorecard = FILE under [deployed], "
            "or set reference = 'pooled'",
        )
    mu = _table(path, raw, "multiplicity")
    _check_keys(path, "multiplicity", mu)
    multiplicity = MultiplicityConfig(
        epsilon=number(path, "multiplicity", "epsilon", mu.get("epsilon", 0.001)),
        neighbours=whole(path, "multiplicity", "neighbours", mu.get("neighbours", 5)),
    )
    review = _review_config(path, raw, root)
    team = _team(path, raw)
    return StudyConfig(
        path=path,
        name=str(study.get("name", path.parent.name)),
        seed=whole(path, "study", "seed", study.get("seed", 0)),
        data=data,
        model=model,
        lenses=lenses,
        proxies=proxies,
        multiplicity=multiplicity,
        review=review,
        team=team,
        deployed=deployed,
    )


def _data_config(path: Path, raw: dict[str, Any]) -> DataConfig:
    """[data] (and [kinds]): the files, the id, outcome and group columns, the features."""
    if "data" not in raw:
        raise UserError(f"{path}: missing section [data]", "add [data] with history, id, outcome")
    d = _table(path, raw, "data")
    _check_keys(path, "data", d)
    _check_data_required(path, d)
    favourable = d["favourable"]
    if isinstance(favourable, float) and not math.isfinite(favourable):
        raise UserError(
            f"{path}: [data] favourable = {toml_text(favourable)} is not a value an outcome "
            "can take",
            'set favourable to the outcome value that counts as good, e.g. "yes" or 1',
        )
    kinds = _table(path, raw, "kinds")
    for feat, kind in kinds.items():
        if kind not in ("numeric", "categorical"):
            raise UserError(
                f"{path}: [kinds] {feat} = {toml_text(kind)}",
                "each kind must be 'numeric' or 'categorical'",
            )
    group = _str_tuple(path, "data", "group", d["group"])
    if not group:
        raise UserError(f"{path}: [data] group is empty", "name the group attribute column(s)")
    root = path.parent
    return DataConfig(
        history=(root / d["history"]),
        pending=(root / d["pending"]) if d.get("pending") else None,
        id=d["id"],
        outcome=d["outcome"],
        favourable=favourable,
        group=group,
        features=_str_tuple(path, "data", "features", d["features"]) if "features" in d else None,
        exclude=_str_tuple(path, "data", "exclude", d.get("exclude", [])),
        kinds=dict(kinds),
        deployed_score=d.get("deployed_score"),
        min_group_cases=whole(path, "data", "min_group_cases", d.get("min_group_cases", 30)),
    )


def _check_data_required(path: Path, d: dict[str, Any]) -> None:
    """Refuse a [data] table without its history, id, outcome, favourable value or group."""
    for required in ("history", "id", "outcome", "favourable", "group"):
        if required not in d:
            raise UserError(
                f"{path}: [data] needs '{required}'"
                + (
                    " (the protected attribute is never chosen for you)"
                    if required == "group"
                    else ""
                ),
                'write group = ["COLUMN"] under [data]: the comments there list candidates '
                "from 'closecall init'"
                if required == "group"
                else "see docs/config.md; 'closecall init DATA' writes a starting config",
            )


def _model_config(path: Path, raw: dict[str, Any]) -> ModelConfig:
    """[model]: penalty, folds and the reference model."""
    m = _table(path, raw, "model")
    _check_keys(path, "model", m)
    model = ModelConfig(
        penalty=number(path, "model", "penalty", m.get("penalty", 1.0)),
        folds=whole(path, "model", "folds", m.get("folds", 5)),
        reference=m.get("reference", "pooled"),
    )
    if model.reference not in ("pooled", "deployed"):
        raise UserError(
            f"{path}: [model] reference = {toml_text(model.reference)}",
            "set reference to 'pooled' or 'deployed'",
        )
    return model


def _proxy_config(path: Path, raw: dict[str, Any]) -> ProxyConfig:
    """[proxies]: the thresholds and the features always or never treated as proxies."""
    p = _table(path, raw, "proxies")
    _check_keys(path, "proxies", p)
    return ProxyConfig(
        association=number(path, "proxies", "association", p.get("association", 0.3)),
        influence=number(path, "proxies", "influence", p.get("influence", 0.02)),
        extra=_str_tuple(path, "proxies", "extra", p.get("extra", [])),
        never=_str_tuple(path, "proxies", "never", p.get("never", [])),
    )


def _review_config(path: Path, raw: dict[str, Any], root: Path) -> ReviewConfig:
    """[review]: the band, reason codes, who may record or read, the ledger and claims."""
    r = _table(path, raw, "review")
    _check_keys(path, "review", r)
    return ReviewConfig(
        band=number(path, "review", "band", r.get("band", 0.5)),
        reasons=_str_tuple(path, "review", "reasons", r.get("reasons", list(DEFAULT_REASONS))),
        reviewers=_str_tuple(path, "review", "reviewers", r.get("reviewers", [])),
        analysts=_str_tuple(path, "review", "analysts", r.get("analysts", [])),
        ledger=_ledger(path, root, r.get("ledger", "ledger.sqlite")),
        claim_minutes=number(path, "review", "claim_minutes", r.get("claim_minutes", 30.0)),
    )


def _deployed(path: Path, raw: dict[str, Any], data: DataConfig) -> DeployedConfig:
    """[deployed] scorecard: the card's path and the SHA-256 of its bytes (docs/scorecard.md).

    The card itself is read and checked against the data when the suite is fitted
    (closecall.suite.scorecard.load_scorecard)."""
    t = _table(path, raw, "deployed")
    _check_keys(path, "deployed", t)
    if "scorecard" not in t:
        return DeployedConfig()
    if not t["scorecard"].strip():
        raise UserError(
            f"{path}: [deployed] scorecard is empty",
            "name the card file (CSV or TOML), or remove the key; see docs/scorecard.md",
        )
    if data.deployed_score:
        raise UserError(
            f"{path}: [deployed] scorecard and [data] deployed_score both name the model in "
            "use; a study has one deployed model",
            "keep the scorecard (closecall then computes its scores itself) or the score "
            "column, not both",
        )
    card = path.parent / t["scorecard"]
    try:
        digest: str | None = hashlib.sha256(card.read_bytes()).hexdigest()
    except OSError:
        digest = None
    return DeployedConfig(scorecard=card, scorecard_digest=digest)


def _ledger(path: Path, root: Path, value: Any) -> Path | str:
    """[review] ledger: a file (relative to the config's folder) or a PostgreSQL database.

    A ``postgresql://`` URL or a libpq conninfo stays text; one holding a password is refused
    (and never echoed): libpq takes it from ~/.pgpass, PGPASSWORD or peer/GSS authentication.
    """
    from closecall.review.ledger.pg_store import check_url, is_url

    if not isinstance(value, str) or not value.strip():
        raise UserError(
            f"{path}: [review] ledger must be a file name or a postgresql:// URL",
            'for example ledger = "ledger.sqlite" or ledger = "postgresql://db.example/reviews"',
        )
    if is_url(value):
        check_url(value.strip(), f"{path}: [review] ledger")
        return value.strip()
    return root / value


def _team(path: Path, raw: dict[str, Any]) -> TeamConfig:
    """[team]: ``keys`` maps logins to base64 Ed25519 public keys (32 bytes each)."""
    t = _table(path, raw, "team")
    _check_keys(path, "team", t)
    keys: dict[str, str] = {}
    for login, text in t.get("keys", {}).items():
        raw_key = None
        if isinstance(text, str):
            try:
                raw_key = base64.b64decode(text.strip(), validate=True)
            except (binascii.Error, ValueError):
                raw_key = None
        if raw_key is None or len(raw_key) != 32:
            raise UserError(
                f"{path}: [team.keys] {login} = {toml_text(text)} is not an Ed25519 public key "
                "(base64 of 32 bytes)",
                f"paste the line 'closecall keys show' prints for {login}; see docs/team.md",
            )
        keys[str(login)] = text.strip()
    anchor = t.get("anchor")
    return TeamConfig(keys=keys, anchor=(path.parent / anchor) if anchor else None)


def _lenses(path: Path, lens_raw: object) -> tuple[CostLens, ...]:
    """The [[lens]] entries: positive finite costs whose threshold lies strictly in (0, 1)."""
    if isinstance(lens_raw, dict):
        lens_raw = [lens_raw]
    if not isinstance(lens_raw, list) or not lens_raw:
        raise UserError(
            f"{path}: [[lens]] should be one or more tables of costs, got {toml_text(lens_raw)}",
            "write each lens as a [[lens]] section with name and the two costs, or leave "
            "[[lens]] out for equal costs",
        )
    lenses: list[CostLens] = []
    for i, entry in enumerate(lens_raw, 1):
        if not isinstance(entry, dict):
            raise UserError(
                f"{path}: [[lens]] number {i} should be a table of costs, got {toml_text(entry)}",
                "write each lens as a [[lens]] section with name and the two costs",
            )
        _check_keys(path, "lens", entry, f"[[lens]] number {i}")
        name = str(entry.get("name", f"lens{i}"))
        label = f"[[lens]] '{name}'"
        c_ff = number(
            path, "lens", "cost_false_favourable", entry.get("cost_false_favourable", 1.0), label
        )
        c_fu = number(
            path,
            "lens",
            "cost_false_unfavourable",
            entry.get("cost_false_unfavourable", 1.0),
            label,
        )
        lens = CostLens(name, c_ff, c_fu)
        t = lens.threshold
        if not 0.0 < t < 1.0:
            raise UserError(
                f"{path}: {label}: costs {c_ff:g} and {c_fu:g} give a threshold "
                f"t = c_ff / (c_ff + c_fu) = {t!r}, which must lie strictly between 0 and 1",
                "choose costs whose ratio is less extreme (it is their ratio that counts)",
            )
        lenses.append(lens)
    if len({lens.name for lens in lenses}) != len(lenses):
        raise UserError(f"{path}: two [[lens]] entries share a name", "give each lens its own name")
    return tuple(lenses)


def _check_parts(path: Path, data: DataConfig, proxies: ProxyConfig) -> None:
    """Each column the config names plays one part: the group is not the outcome, the id or
    the deployed score; no column is named twice; the proxy lists name features."""
    parts: list[tuple[str, str]] = [("id", data.id), ("outcome", data.outcome)]
    if data.deployed_score:
        parts.append(("deployed_score", data.deployed_score))
    parts += [("group", g) for g in data.group]
    parts += [("features", f) for f in data.features or ()]
    parts += [("exclude", e) for e in data.exclude]
    seen: dict[str, str] = {}
    for key, column in parts:
        first = seen.get(column)
        if first is None:
            seen[column] = key
            continue
        if "group" in (first, key) and first != key:
            other = key if first == "group" else first
            why = (
                "the group attribute enters the models as the group, not as a feature"
                if other in ("features", "exclude")
                else f"the group attribute may not be the {other.replace('_', ' ')} column"
            )
            raise UserError(
                f"{path}: [data] group names '{column}', which is also under [data] {other}: {why}",
                "name the protected attribute's column(s) under group and nowhere else",
            )
        where = f"twice under [data] {key}" if first == key else f"under [data] {first} and {key}"
        raise UserError(
            f"{path}: column '{column}' is named {where}",
            "each column plays one part in a study (id, outcome, group, feature, deployed score "
            "or excluded): remove the second mention",
        )
    for kind_column, kind in data.kinds.items():
        if kind_column in data.group and kind == "numeric":
            raise UserError(
                f"{path}: [kinds] {kind_column} = \"numeric\", but '{kind_column}' is a group "
                "column",
                "group levels are always categories: remove it from [kinds]",
            )
    both = sorted(set(proxies.extra) & set(proxies.never))
    if both:
        raise UserError(
            f"{path}: '{both[0]}' is listed under both [proxies] extra and never",
            "keep it in one of the two lists",
        )
    for key, names in (("extra", proxies.extra), ("never", proxies.never)):
        for name in names:
            part = seen.get(name)
            if part is not None and part != "features":
                raise UserError(
                    f"{path}: [proxies] {key} names '{name}', which is [data] {part}, not a "
                    "feature",
                    f"list only features under [proxies] {key}",
                )

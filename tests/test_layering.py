"""The package's layers, read from the source with ``ast`` (nothing is imported).

Views never import each other; engine packages never import a view; module-level imports form
no cycle. A failure lists every offending import (file, line) or every cycle.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src"
PACKAGE = SRC / "closecall"
ENGINE = ("core", "setup", "suite", "analysis", "review", "reports")
VIEWS = ("cli", "tui")
#: The one place a view starts another: ``closecall review`` (a CLI command) opens the review
#: screens, importing them inside the command function so no CLI start-up pays for Textual.
LAUNCHES = {("closecall.cli.review_cmds", "closecall.tui.app")}
#: Cycles hidden behind function-level or TYPE_CHECKING imports, still to be taken apart (not at
#: module level: Python never sees them). None left: the chain check (ledger/chain.py) and the
#: ledger errors (ledger/damage.py) need neither store, so store ⇄ verify is gone.
KNOWN_DEFERRED_CYCLES: list[list[str]] = []


def _module_name(path: Path) -> str:
    parts = path.relative_to(SRC).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _resolve(module: str, path: Path, node: ast.ImportFrom) -> str:
    if node.level == 0:
        return node.module or ""
    base = module.split(".") if path.name == "__init__.py" else module.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join([*base, *([node.module] if node.module else [])])


def _imports(
    module: str, path: Path, known: set[str], *, top_level_only: bool
) -> Iterator[tuple[str, int]]:
    """(imported closecall module, line) for every import in ``path``; with ``top_level_only``,
    only those run when the module is imported (not inside functions, not under TYPE_CHECKING).
    """
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))

    def walk(nodes: list[ast.stmt]) -> Iterator[ast.stmt]:
        for node in nodes:
            yield node
            if isinstance(node, ast.If) and top_level_only:
                test = ast.unparse(node.test)
                if "TYPE_CHECKING" not in test:
                    yield from walk(node.body)
                yield from walk(node.orelse)
            elif isinstance(node, ast.Try) and top_level_only:
                yield from walk(node.body)
                for handler in node.handlers:
                    yield from walk(handler.body)

    nodes = walk(tree.body) if top_level_only else ast.walk(tree)
    for node in nodes:
        if isinstance(node, ast.Import):
            targets = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = _resolve(module, path, node)
            # ``from pkg import mod`` imports the submodule when there is one
            targets = [
                f"{base}.{a.name}" if f"{base}.{a.name}" in known else base for a in node.names
            ]
        else:
            continue
        for target in targets:
            if target.split(".")[0] == "closecall":
                yield target, node.lineno


def _layer(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def _crossings(source_layers: tuple[str, ...], banned: tuple[str, ...]) -> list[str]:
    modules = _modules()
    found = []
    for module, path in modules.items():
        if _layer(module) not in source_layers:
            continue
        for target, line in _imports(module, path, set(modules), top_level_only=False):
            crosses = _layer(target) in banned and _layer(target) != _layer(module)
            if crosses and (module, target) not in LAUNCHES:
                found.append(f"{path.relative_to(SRC)}:{line} imports {target}")
    return found


def test_the_cli_never_imports_the_review_screens() -> None:
    assert _crossings(("cli",), ("tui",)) == []


def test_the_review_screens_never_import_the_cli() -> None:
    assert _crossings(("tui",), ("cli",)) == []


def test_engine_packages_never_import_a_view() -> None:
    assert _crossings(ENGINE, VIEWS) == []


def test_the_launch_exception_is_inside_a_function() -> None:
    """The CLI may start the screens only from inside its command, never at import."""
    modules = _modules()
    for module, target in LAUNCHES:
        top = {t for t, _ in _imports(module, modules[module], set(modules), top_level_only=True)}
        assert target not in top


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                out.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def module_graph() -> dict[str, set[str]]:
    """Module-level imports between closecall modules (a package's ``__init__`` excluded as a
    target when a submodule is named, since importing a submodule runs its package first)."""
    modules = _modules()
    known = set(modules)
    graph: dict[str, set[str]] = {}
    for module, path in modules.items():
        targets = {t for t, _ in _imports(module, path, known, top_level_only=True)}
        graph[module] = {t for t in targets if t in known and t != module}
    return graph


def test_the_cycle_finder_finds_a_cycle() -> None:
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []


@pytest.mark.parametrize("package", ["closecall"])
def test_no_import_cycles_between_modules(package: str) -> None:
    graph = module_graph()
    # a package __init__ re-exporting its submodules is not a cycle with them
    for module in list(graph):
        if (PACKAGE.parent / module.replace(".", "/") / "__init__.py").exists():
            graph[module] = {t for t in graph[module] if not t.startswith(module + ".")}
    assert _cycles(graph) == []


def test_no_import_cycles_even_through_deferred_imports() -> None:
    """Imports inside functions or under TYPE_CHECKING hide a cycle from Python, not from the
    reader: the layers must not lean on each other that way either."""
    modules = _modules()
    known = set(modules)
    graph = {
        module: {
            t
            for t, _ in _imports(module, path, known, top_level_only=False)
            if t in known and t != module and not t.startswith(module + ".")
        }
        for module, path in modules.items()
    }
    assert [c for c in _cycles(graph) if c not in KNOWN_DEFERRED_CYCLES] == []


# ------------------------------------------------------------------ views compute through Study

#: Engine names a view may import: types it reads or catches, constants and words it shows,
#: checks of the user's input run before a study is opened, and the writing of an output file
#: the user named. Every result a view shows comes from ``closecall.api`` (``Study``, its
#: ``ledger`` and its results); ``closecall.core`` (errors, vocabulary, text) is free to use.
VIEW_MAY_IMPORT: dict[str, set[str]] = {
    "closecall.suite.opening": {"OpenedStudy"},
    # the one deferral policy (a deferred case still awaits a decision), read off state codes;
    # the answer Study.answer returns, which the review list keeps and reads its rows' words off
    "closecall.review.query": {"QueueQuery", "QueueAnswer", "awaiting_decision"},
    "closecall.review.queue": {"SORT_KEYS", "MEASURES", "Queue"},
    "closecall.review.triage": {
        "TIER_KEYS",
        "TIERS",
        "TIER_WORDS",
        "TIER_REASONS",
        "CLOSENESS_WORDS",
        "PROXIES_WORD",
    },
    "closecall.review.ledger": {"Entry", "Draft", "Claim", "VerifyResult", "canonical_json"},
    "closecall.review.ledger.verify": {"VerifyResult"},
    "closecall.review.ledger.entry": {"HASHED_FIELDS"},
    # is the database a command names a PostgreSQL URL (checked before any ledger is opened)
    "closecall.review.ledger.pg_store": {"is_url"},
    "closecall.review.conflicts": {"ConflictingDecision"},
    "closecall.review.decisions": {"check_text"},
    "closecall.analysis.margin_distribution": {"MarginDistribution"},
    "closecall.analysis.multiplicity": {"UNCERTAINTY_EPSILON"},
    "closecall.analysis.whatif": {"Policy", "parse_group_threshold"},
    # the words of a fit flag, and its fits grouped one line per model, group and problem
    "closecall.suite.fit_flags": {"PROBLEM_WORDS", "flag_label", "fits_text", "grouped_flags"},
    "closecall.setup.config": {"CONFIG_NAME", "DEFAULT_REASONS"},
    "closecall.setup.output_files": {
        "StudyFile",
        "check_config_output",
        "check_key_file",
        "check_output",
        "study_files",
        "write_output",
    },
    "closecall.reports.export": {"ExportResult", "spreadsheet_safe", "table_bytes", "write_export"},
    "closecall.reports.disparity.periods": {"check_period"},
    "closecall.reports.disparity.report": {"DisparityReport"},
    "closecall.reports.disparity.contingency": {"IndependenceTest"},
    "closecall.reports.disparity.heldout": {"RateGap"},
    "closecall.reports.disparity.power": {"Detectable"},
}

#: Whole view modules still calling the engine for their work, to move behind ``Study`` (the
#: list only shrinks). None left: the team and key commands go through ``closecall.api.team``
#: and ``Ledger.anchor``, the PostgreSQL set-up commands through
#: ``closecall.api.ledger_database``.
PENDING_MODULES: dict[str, str] = {}

#: Engine computations views still call themselves, to move behind ``Study`` (each entry is
#: (view module, engine module, name); the list only shrinks). None left: the review list reads
#: its rows' words from ``Study.answer`` (``closeness_codes``, ``others_differ``) and its header's
#: attribute from ``Study.group_attribute``.
PENDING: set[tuple[str, str, str]] = set()


def view_engine_imports(package: Path = PACKAGE) -> set[tuple[str, str, str]]:
    """(view module, engine module, name) for every engine name a view imports that is not in
    :data:`VIEW_MAY_IMPORT` (anywhere in the module: at the top, in a function, for typing);
    ``import closecall.<engine>…`` counts as importing everything (name ``*``)."""
    found = set()
    for layer in VIEWS:
        for path in sorted((package / layer).rglob("*.py")):
            where = path.relative_to(package).as_posix()
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
                if isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                    pairs = [(node.module, a.name) for a in node.names]
                elif isinstance(node, ast.Import):
                    pairs = [(a.name, "*") for a in node.names]
                else:
                    continue
                for module, name in pairs:
                    if _layer(module) in ENGINE[1:] and name not in VIEW_MAY_IMPORT.get(
                        module, set()
                    ):
                        found.add((where, module, name))
    return found


def test_views_take_their_results_from_study() -> None:
    """A view imports from the engine only types, constants, words and input checks; every
    result it shows comes through ``closecall.api`` (issue 13: the CLI and the review screen
    are thin views over ``Study``)."""
    found = {f for f in view_engine_imports() - PENDING if f[0] not in PENDING_MODULES}
    assert sorted(found) == []


def test_the_pending_lists_only_shrink() -> None:
    found = view_engine_imports()
    stale = sorted(PENDING - found)
    assert stale == [], f"moved behind Study: remove these from PENDING: {stale}"
    done = sorted(set(PENDING_MODULES) - {f[0] for f in found})
    assert done == [], f"moved behind Study: remove these from PENDING_MODULES: {done}"


def test_the_view_check_flags_an_engine_computation(tmp_path: Path) -> None:
    """The check reads the source: a command computing a model comparison itself is caught."""
    cli = tmp_path / "closecall" / "cli"
    cli.mkdir(parents=True)
    (tmp_path / "closecall" / "tui").mkdir()
    (cli / "cmd.py").write_text(
        "from closecall.analysis.comparison import compare_models\n"
        "from closecall.review.query import QueueQuery\n"
        "def f():\n    import closecall.review.decisions\n",
        encoding="utf-8",
    )
    assert view_engine_imports(tmp_path / "closecall") == {
        ("cli/cmd.py", "closecall.analysis.comparison", "compare_models"),
        ("cli/cmd.py", "closecall.review.decisions", "*"),
    }

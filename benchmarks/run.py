"""Benchmark closecall at national scale against the baselines a user would otherwise run.

    python -m benchmarks.run --cases 850000 [--repeats 3] [--out benchmarks/out/run.json]
    python -m benchmarks.run --cases 10000,100000,850000     # how cost grows with cases

For each size it writes the demo study, then runs every step in a fresh interpreter (so each
step's peak memory, read from ``getrusage``, is its own), ``--repeats`` times, and keeps the
medians. Steps and their baselines (see docs/performance.md):

- load + validate + encode  vs  pandas ``read_csv`` of the same files;
- the whole suite (``fit_suite``)  vs  one plain ``LogisticRegression()`` fit of the pooled
  model on the same encoded matrix; ``closecall fit`` end to end (with the snapshot write);
- closed-form bands for every case  vs  200 bootstrap refits of the pooled model (a few timed
  on the whole history and scaled; agreement measured on a subsample);
- proxies, contributions, counterparts, similar cases, explain (absolute);
- queue ranking and filters (absolute);
- what-if figures for a model, a lens, a group threshold and a dropped card weight  vs  a
  pandas crosstab of the same two decision columns (the counts alone);
- ledger durable appends per second and verify of 100,000 entries  vs  plain SQLite inserts;
- the review screen's first paint and key latency (benchmarks/tui_latency.py, if present).

It prints a Markdown table and writes every number as JSON. Not part of the test run.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from benchmarks.measure import Result, median_of, run_child

TARGETS = {
    "suite_over_plain_fit": 4.0,  # at most
    "bootstrap_over_bands": 100.0,  # at least
    "tui_first_paint_s": 2.0,  # at most
    "ledger_appends_per_s": 500.0,  # at least
    "peak_rss_gb": 4.0,  # at most
    "tui_key_ratio": 1.1,  # at most: key latency at --cases over the same at 1,000 cases
}

REPEATED = [
    "load_closecall",
    "load_pandas",
    "suite",
    "plain_fit",
    "fit_study",
    "open_snapshot",
    "bands",
    "proxies",
    "contributions",
    "scorecard",
    "counterparts",
    "similar",
    "explain",
    "queue",
    "whatif",
]


def machine() -> dict[str, Any]:
    import numpy as np

    info: dict[str, Any] = {
        "python": platform.python_version(),
        "platform": platform.platform(),
        "cpus": os.cpu_count(),
        "numpy": np.__version__,
        "blas_env": {
            k: v
            for k, v in os.environ.items()
            if k.startswith(("OPENBLAS", "OMP_", "MKL_", "MALLOC_"))
        },
    }
    try:
        info["cpu"] = next(
            line.split(":", 1)[1].strip()
            for line in Path("/proc/cpuinfo").read_text().splitlines()
            if line.startswith("model name")
        )
        mem_kb = next(
            int(line.split()[1])
            for line in Path("/proc/meminfo").read_text().splitlines()
            if line.startswith("MemTotal")
        )
        info["memory_gb"] = round(mem_kb / 2**20, 1)
        info["load_average_at_start"] = os.getloadavg()
    except (OSError, StopIteration):
        pass
    try:
        from threadpoolctl import threadpool_info

        info["blas"] = [
            {k: d.get(k) for k in ("internal_api", "version", "num_threads", "architecture")}
            for d in threadpool_info()
        ]
    except ImportError:
        pass
    return info


def _run(step: str, params: dict[str, Any], repeats: int, inline: bool) -> Result:
    runs: list[Result] = []
    for _ in range(repeats):
        if inline:
            from benchmarks.measure import peak_rss_mb
            from benchmarks.steps import STEPS

            r = STEPS[step](params)
            r["peak_rss_mb"] = peak_rss_mb()
            runs.append(r)
        else:
            runs.append(run_child(step, params))
    return median_of(runs)


def bench_size(cases: int, args: argparse.Namespace, work: Path) -> dict[str, Result]:
    from closecall.setup.demo import write_demo

    folder = work / f"demo-{cases}"
    shutil.rmtree(folder, ignore_errors=True)
    t = time.perf_counter()
    config = write_demo(folder, cases=cases, seed=args.seed)
    out: dict[str, Result] = {"generate": {"time_s": time.perf_counter() - t}}
    sizes = {f: (folder / f).stat().st_size / 2**20 for f in ("history.csv", "pending.csv")}
    out["generate"].update({f"{k}_mb": v for k, v in sizes.items()})
    params: dict[str, Any] = {"config": str(config)}
    steps = [s for s in REPEATED if _wanted(s, args)]
    for s in steps:
        _say(f"  {cases:,} cases: {s}")
        out[s] = _run(s, params, args.repeats, args.inline)
    if _wanted("bootstrap", args):
        _say(f"  {cases:,} cases: bootstrap")
        timed = args.bootstrap_timed or (args.bootstrap_refits if cases <= 100_000 else 10)
        boot = {
            **params,
            "refits": args.bootstrap_refits,
            "timed": min(timed, args.bootstrap_refits),
            "agree_rows": args.agree_rows,
            "agree_cases": args.agree_cases,
            "seed": args.seed,
        }
        out["bootstrap"] = _run("bootstrap", boot, 1, args.inline)
    return out


def _wanted(step: str, args: argparse.Namespace) -> bool:
    if args.only and step not in args.only:
        return False
    return step not in args.skip


def _say(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


def run_tui(cases: int, keys: int) -> Result:
    """Fold in the review screen's own benchmark (written with the TUI)."""
    script = Path(__file__).with_name("tui_latency.py")
    if not script.exists():
        return {"skipped": 1.0, "note": "benchmarks/tui_latency.py not there yet"}
    cmd = [sys.executable, "-m", "benchmarks.tui_latency", "--cases", str(cases)]
    cmd += ["--keys", str(keys), "--json"]
    proc = subprocess.run(
        cmd, cwd=script.parent.parent, capture_output=True, text=True, timeout=3600
    )
    if proc.returncode != 0:
        return {"skipped": 1.0, "note": f"tui_latency failed: {proc.stderr[-500:]}"}
    report = json.loads(proc.stdout[proc.stdout.index("{") :])
    large = report["sizes"][str(cases)]
    small = next(v for k, v in report["sizes"].items() if k != str(cases))
    out: Result = {f"{k}": float(v) for k, v in large.items()}
    out.update({f"small {k}": float(v) for k, v in small.items()})
    out.update({f"ratio {k}": float(v) for k, v in report["ratio_large_to_small"].items()})
    return out


def summary(results: dict[str, Any]) -> dict[str, Any]:
    """Ratios and target checks at the largest size."""
    largest = max(results["sizes"], key=int)
    r = results["sizes"][largest]
    out: dict[str, Any] = {"cases": int(largest)}

    def get(step: str, key: str) -> float | None:
        value = r.get(step, {}).get(key)
        return float(value) if isinstance(value, int | float) else None

    suite, plain = get("suite", "time_s"), get("plain_fit", "time_s")
    encoding = get("suite", "stage encoding_s") or 0.0
    if suite and plain:
        # the plain fit starts from the encoded matrix; so does the suite after its encoding
        # stage (encoding is timed in the load row)
        out["suite_over_plain_fit"] = (suite - encoding) / plain
        out["suite_with_encoding_over_plain_fit"] = suite / plain
    load, pandas = get("load_closecall", "time_s"), get("load_pandas", "time_s")
    if load and pandas:
        out["load_over_read_csv"] = load / pandas
    boot = get("bootstrap", "bootstrap_estimated_s")
    scratch = get("bands", "scratch_pooled_s")
    stored = get("bands", "snapshot_all_models_s")
    models = get("bands", "models") or 1.0
    if boot and scratch:
        out["bootstrap_over_bands"] = boot / scratch
    if boot and stored:
        out["bootstrap_over_stored_bands"] = boot / (stored / models)
    appends = results.get("ledger", {}).get("append_per_s")
    if isinstance(appends, int | float):
        out["ledger_appends_per_s"] = float(appends)
    tui = results.get("tui", {})
    if isinstance(tui.get("first_paint_s"), int | float):
        out["tui_first_paint_s"] = float(tui["first_paint_s"])
        out["tui_key_ratio"] = max(
            float(tui.get("ratio key_down_s", 0.0)), float(tui.get("ratio key_pagedown_s", 0.0))
        )
    peaks = [
        float(v["peak_rss_mb"])
        for size in results["sizes"].values()
        for v in size.values()
        if isinstance(v.get("peak_rss_mb"), int | float)
    ]
    for extra in ("ledger", "tui"):
        value = results.get(extra, {}).get("peak_rss_mb")
        if isinstance(value, int | float):
            peaks.append(float(value))
    if peaks:
        out["peak_rss_gb"] = max(peaks) / 1024.0
    checks = {}
    for key, target in TARGETS.items():
        if key not in out:
            continue
        at_least = key in ("bootstrap_over_bands", "ledger_appends_per_s")
        checks[key] = out[key] >= target if at_least else out[key] <= target
    out["targets_met"] = checks
    return out


def _minus(r: dict[str, Any], step: str, key: str, less: str) -> str:
    a, b = r.get(step, {}).get(key), r.get(step, {}).get(less, 0.0)
    return f"{a - b:.2f}" if isinstance(a, int | float) else "—"


def table(results: dict[str, Any]) -> str:
    """Markdown tables: the national-scale run and growth with cases."""
    lines: list[str] = []
    sizes = sorted(results["sizes"], key=int)
    largest = sizes[-1]
    r = results["sizes"][largest]

    def t(step: str, key: str = "time_s", scale: float = 1.0, fmt: str = "{:.2f}") -> str:
        value = r.get(step, {}).get(key)
        return fmt.format(value * scale) if isinstance(value, int | float) else "—"

    def mem(step: str, source: dict[str, Any] | None = None) -> str:
        value = (source or r).get(step, {}).get("peak_rss_mb")
        return f"{value:,.0f}" if isinstance(value, int | float) else "—"

    s = results["summary"]

    def ratio(key: str, fmt: str = "{:.1f}×") -> str:
        return fmt.format(s[key]) if key in s else "—"

    lines += [
        f"### {int(largest):,} cases ({results['repeats']} runs each, medians)",
        "",
        "| step | closecall | baseline (same run) | ratio | peak MB |",
        "| --- | --- | --- | --- | --- |",
        f"| load + validate + encode | {t('load_closecall')} s | pandas read_csv "
        f"{t('load_pandas')} s | {ratio('load_over_read_csv')} | {mem('load_closecall')} |",
        f"| whole suite on the encoded matrix (fit_suite after its encoding stage) | "
        f"{_minus(r, 'suite', 'time_s', 'stage encoding_s')} s | one LogisticRegression() "
        f"{t('plain_fit')} s | {ratio('suite_over_plain_fit')} | {mem('suite')} |",
        f"| whole suite (fit_suite, encoding included) | {t('suite')} s | the same "
        f"| {ratio('suite_with_encoding_over_plain_fit')} | — |",
        f"| `closecall fit` end to end | {t('fit_study')} s (snapshot "
        f"{t('fit_study', 'snapshot_mb', fmt='{:.0f}')} MB) | — | — | {mem('fit_study')} |",
        f"| bands, every case, pooled, closed form from scratch | "
        f"{t('bands', 'scratch_pooled_s', 1000, '{:.0f}')} ms | 200 bootstrap refits "
        f"≈ {t('bootstrap', 'bootstrap_estimated_s', fmt='{:.0f}')} s | "
        f"{ratio('bootstrap_over_bands', '{:,.0f}×')} | {mem('bands')} |",
        f"| bands, every case, all models, from the snapshot | "
        f"{t('bands', 'snapshot_all_models_s', 1000, '{:.0f}')} ms | — | "
        f"{ratio('bootstrap_over_stored_bands', '{:,.0f}× (per model)')} | — |",
        f"| open cached snapshot | {t('open_snapshot', scale=1000, fmt='{:.0f}')} ms | — | — "
        f"| {mem('open_snapshot')} |",
        f"| proxies | {t('proxies')} s | — | — | {mem('proxies')} |",
        f"| contributions, every case | {t('contributions')} s | — | — | {mem('contributions')} |",
        f"| deployed scorecard: points of every case (history + pending) / points per feature | "
        f"{t('scorecard')} s / {t('scorecard', 'contributions_s')} s | pandas (pd.cut, map) "
        f"{t('scorecard', 'pandas_s')} s | — | {mem('scorecard')} |",
        f"| counterparts, every case | {t('counterparts')} s | — | — | {mem('counterparts')} |",
        f"| similar cases: 1 / 1,000 cases | {t('similar', 'one_case_s', 1000, '{:.0f}')} ms / "
        f"{t('similar', 'cases_1000_s')} s | — | — | {mem('similar')} |",
        f"| explain one case (first / next) | {t('explain', 'first_case_s', 1000, '{:.0f}')} / "
        f"{t('explain', 'next_case_s', 1000, '{:.0f}')} ms | — | — | {mem('explain')} |",
        f"| queue: rank | {t('queue', 'rank_s', 1000, '{:.0f}')} ms | — | — | {mem('queue')} |",
        "| queue: filter group / flips / id / ambiguous / rests-on | "
        + " / ".join(
            t("queue", f"{k}_s", 1000, "{:.0f}")
            for k in ("group", "flips", "id_prefix", "ambiguous", "rests_on_proxies")
        )
        + " ms | — | — | — |",
        "| what-if figures: model / lens / group threshold / dropped weight | "
        + " / ".join(
            t("whatif", f"{k}_s", 1000, "{:.0f}")
            for k in ("model", "lens", "group_threshold", "drop_weight")
        )
        + f" ms | pandas crosstab {t('whatif', 'pandas_crosstab_s', 1000, '{:.0f}')} ms | — | "
        f"{mem('whatif')} |",
    ]
    led = results.get("ledger", {})
    if isinstance(led.get("append_per_s"), int | float):
        lines.append(
            f"| ledger: durable appends | {led['append_per_s']:,.0f} /s | plain SQLite inserts "
            f"{led['plain_insert_durable_per_s']:,.0f} /s (one transaction: "
            f"{led['plain_insert_one_transaction_per_s']:,.0f} /s) | "
            f"{led['append_per_s'] / led['plain_insert_durable_per_s']:.2f}× | "
            f"{mem('ledger', results)} |"
        )
        lines.append(
            f"| ledger: verify {int(led['verify_entries']):,} entries | {led['verify_s']:.2f} s "
            f"| plain SELECT of the rows {led['plain_read_s']:.2f} s | "
            f"{led['verify_s'] / led['plain_read_s']:.0f}× | — |"
        )
    tui = results.get("tui", {})
    if isinstance(tui.get("first_paint_s"), int | float):
        lines.append(
            f"| TUI first paint (cached snapshot) | {tui['first_paint_s'] * 1000:.0f} ms | "
            f"1,000 cases {tui['small first_paint_s'] * 1000:.0f} ms | "
            f"{tui['ratio first_paint_s']:.2f}× | {mem('tui', results)} |"
        )
        lines.append(
            f"| TUI key press j / pagedown | {tui['key_down_s'] * 1000:.0f} / "
            f"{tui['key_pagedown_s'] * 1000:.0f} ms | 1,000 cases "
            f"{tui['small key_down_s'] * 1000:.0f} / {tui['small key_pagedown_s'] * 1000:.0f} ms"
            f" | {tui['ratio key_down_s']:.2f}× / {tui['ratio key_pagedown_s']:.2f}× | — |"
        )
    boot = r.get("bootstrap", {})
    if "sd_over_se_median" in boot:
        lines += [
            "",
            f"Bands vs bootstrap agreement ({int(boot['refits'])} refits on "
            f"{int(boot['agree_rows']):,} history rows, {int(boot['agree_cases']):,} cases): "
            f"bootstrap SD / closed-form SE median {boot['sd_over_se_median']:.3f} "
            f"(5–95 %: {boot['sd_over_se_p05']:.3f}–{boot['sd_over_se_p95']:.3f}), "
            f"correlation {boot['se_sd_correlation']:.4f}; the 95 % band straddles zero for "
            f"{int(boot['straddle_wald']):,} cases, the bootstrap interval for "
            f"{int(boot['straddle_bootstrap']):,}, agreement {boot['straddle_agreement']:.2%}.",
        ]
    lines += [
        "",
        "Targets: "
        + ", ".join(
            f"{k} {'met' if ok else 'MISSED'} ({s[k]:.2f})" for k, ok in s["targets_met"].items()
        ),
    ]
    if len(sizes) > 1:
        lines += [
            "",
            "### Growth with cases (medians, seconds; peak MB of the suite)",
            "",
            "| cases | load | read_csv | suite (encoded) | plain fit | ratio | `closecall fit` | "
            "bands (scratch) | bootstrap 200 (est.) | queue rank | peak MB |",
            "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
        ]
        for size in sizes:
            g = results["sizes"][size]

            def v(step: str, key: str = "time_s", g: dict[str, Any] = g) -> float | None:
                x = g.get(step, {}).get(key)
                return float(x) if isinstance(x, int | float) else None

            def f(x: float | None, fmt: str = "{:.2f}") -> str:
                return "—" if x is None else fmt.format(x)

            su, pl = v("suite"), v("plain_fit")
            su = su - (v("suite", "stage encoding_s") or 0.0) if su else su
            lines.append(
                f"| {int(size):,} | {f(v('load_closecall'))} | {f(v('load_pandas'))} | "
                f"{f(su)} | {f(pl)} | {f(su / pl if su and pl else None, '{:.1f}×')} | "
                f"{f(v('fit_study'))} | {f(v('bands', 'scratch_pooled_s'), '{:.3f}')} | "
                f"{f(v('bootstrap', 'bootstrap_estimated_s'), '{:.0f}')} | "
                f"{f(v('queue', 'rank_s'), '{:.3f}')} | {f(v('suite', 'peak_rss_mb'), '{:,.0f}')} |"
            )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> dict[str, Any]:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", default="850000", help="one size or a comma-separated list")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--out", type=Path, help="write every number here as JSON")
    parser.add_argument("--workdir", type=Path, help="where the demo studies go (default: tmp)")
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--only", nargs="*", default=[], help="run only these steps")
    parser.add_argument("--skip", nargs="*", default=[], help="skip these steps")
    parser.add_argument("--inline", action="store_true", help="run steps in this process")
    parser.add_argument("--bootstrap-refits", type=int, default=200)
    parser.add_argument(
        "--bootstrap-timed", type=int, default=0, help="whole-history refits timed (0: auto)"
    )
    parser.add_argument("--agree-rows", type=int, default=50_000)
    parser.add_argument("--agree-cases", type=int, default=20_000)
    parser.add_argument("--ledger-appends", type=int, default=2_000)
    parser.add_argument("--verify-entries", type=int, default=100_000)
    parser.add_argument("--tui-keys", type=int, default=40)
    parser.add_argument(
        "--blas-threads", type=int, help="set OPENBLAS_NUM_THREADS for every step (default: off)"
    )
    args = parser.parse_args(argv)
    if args.blas_threads:
        for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ[var] = str(args.blas_threads)
    sizes = [int(c.replace("_", "")) for c in str(args.cases).split(",")]
    results: dict[str, Any] = {
        "command": " ".join(["python -m benchmarks.run", *(argv or sys.argv[1:])]),
        "machine": machine(),
        "repeats": args.repeats,
        "sizes": {},
    }
    tmp = tempfile.mkdtemp(prefix="cc-bench-", dir=args.workdir)
    work = Path(tmp)
    started = time.perf_counter()
    try:
        for n in sizes:
            results["sizes"][str(n)] = bench_size(n, args, work)
        if _wanted("ledger", args):
            _say("  ledger")
            params = {
                "appends": args.ledger_appends,
                "verify_entries": args.verify_entries,
                "tmp": str(work),
            }
            results["ledger"] = _run("ledger", params, 1, args.inline)
        if _wanted("tui", args) and not args.inline:
            _say("  tui")
            results["tui"] = run_tui(max(sizes), args.tui_keys)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    results["wall_s"] = time.perf_counter() - started
    results["summary"] = summary(results)
    text = table(results)
    results["table"] = text
    print(text)
    if args.out:
        args.out.parent.mkdir(parents=True, exist_ok=True)
        args.out.write_text(json.dumps(results, indent=1, default=str))
    return results


if __name__ == "__main__":
    main()

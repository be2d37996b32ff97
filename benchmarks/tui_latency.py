"""Review screen latency: first paint with a cached 850,000-case snapshot, and key presses.

Not a test: prints timings (and writes them as JSON with --json). Run with

    .venv/bin/python -m benchmarks.tui_latency [--cases 850000] [--small 1000] [--keys 60]

It builds the demo study once, then makes two cached snapshots from it by tiling its cases
(fresh ids, jittered log-odds, same models): one with ``--small`` cases and one with ``--cases``.
Each is opened the normal way (``open_study`` finds the cached snapshot and memory-maps it) and
shown in the review app headless at 80×24. Measured:

- open: ``open_study`` on the cached snapshot;
- first paint: from starting the app to the first line of the close-call list drawn (reading
  the ledger, the id index and the ranking included);
- measures ready: until the dependence and band columns are filled in (computed in a worker
  after the first paint; the list can be used meanwhile);
- key press: mean time of ``j`` (cursor down) and ``pagedown`` through the pilot, which adds a
  fixed cost per key on every size (about 70 ms on these machines) — compare sizes by ratio;
- draw: mean time to format every visible line of the list (``render_line``), which is the part
  of a key press that could grow with the data;
- filter: from pressing ``f`` (flips only) to the list ranked again and drawn;
- case open: from ⏎ on the list to the case screen filled in (explanation, bands of every
  model, history, draft), the first time (per-model bands computed and cached) and after.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import shutil
import statistics
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

from closecall.setup.config import load_config
from closecall.setup.demo import write_demo
from closecall.suite.opening import OpenedStudy, open_study
from closecall.suite.snapshot import Snapshot, save_snapshot, snapshot_dir

SIZE = (80, 24)


def tiled_study(base: Path, work: Path, n: int, seed: int = 3) -> Path:
    """A copy of the demo study whose cached snapshot holds ``n`` cases tiled from the demo's."""
    folder = work / f"study-{n}"
    if folder.exists():
        shutil.rmtree(folder)
    shutil.copytree(base, folder, ignore=shutil.ignore_patterns(".closecall", "ledger.sqlite*"))
    fitted = open_study(base / "closecall.toml")
    snap = fitted.snapshot
    m = snap.n_cases
    take = np.arange(n) % m
    rng = np.random.default_rng(seed)
    arrays: dict[str, np.ndarray] = {}
    for name, arr in snap.arrays.items():
        arr = np.asarray(arr)
        arrays[name] = arr[take] if arr.ndim >= 1 and arr.shape[0] == m else arr.copy()
    arrays["case_ids"] = np.char.add("BM-", np.char.zfill(np.arange(n).astype(str), 7))
    for model in snap.model_names:
        arrays[f"logit__{model}"] = arrays[f"logit__{model}"] + rng.normal(0.0, 0.25, n)
    config = load_config(folder / "closecall.toml")
    meta = {**snap.meta, "n_cases": n}
    target = snapshot_dir(config, snap.id)
    if target.exists():
        shutil.rmtree(target)
    save_snapshot(config, Snapshot(snap.id, meta, arrays))
    return folder / "closecall.toml"


async def _measure(study: OpenedStudy, keys: int) -> dict[str, float]:
    from closecall.tui.app import ReviewApp
    from closecall.tui.case_list import CaseList
    from closecall.tui.case_screen import CaseScreen
    from closecall.tui.queue_screen import QueueScreen

    drawn: list[float] = []
    draw_line = CaseList.render_line

    def noting_draw(self: CaseList, y: int) -> Any:
        if not drawn:
            drawn.append(time.perf_counter())
        return draw_line(self, y)

    app = ReviewApp(study=study, login="bench")
    start = time.perf_counter()
    CaseList.render_line = noting_draw  # type: ignore[method-assign]
    try:
        async with app.run_test(size=SIZE) as pilot:
            while not drawn:
                await pilot.pause(0.005)
            first_paint = drawn[0] - start
            while app.session is None or not app.session.measures_ready:
                await pilot.pause(0.005)
            await pilot.pause()
            measures_ready = time.perf_counter() - start
            assert isinstance(app.screen, QueueScreen)
            key_times = await _keys(pilot, app.screen.query_one(CaseList), keys)
            session = app.session
            t = time.perf_counter()
            await pilot.press("f")  # flips only: the list is ranked again in a worker
            while not (session.settings.flips and session.queue is not None):
                await pilot.pause(0.005)
            await pilot.pause()
            refilter = time.perf_counter() - t
            await pilot.press("f")
            while session.settings.flips:
                await pilot.pause(0.005)
            case_open = []
            for _ in range(3):
                t = time.perf_counter()
                await pilot.press("enter")
                while not isinstance(app.screen, CaseScreen) or app.screen.details is None:
                    await pilot.pause(0.005)
                case_open.append(time.perf_counter() - t)
                await pilot.press("escape", "j")
            return {
                "first_paint_s": first_paint,
                "measures_ready_s": measures_ready,
                **key_times,
                "filter_s": refilter,
                "case_open_first_s": case_open[0],
                "case_open_next_s": statistics.mean(case_open[1:]),
            }
    finally:
        CaseList.render_line = draw_line  # type: ignore[method-assign]


async def _keys(pilot: Any, cases: Any, keys: int) -> dict[str, float]:
    """Mean time per key press through the pilot, and per full draw of the visible lines."""
    per_key: dict[str, float] = {}
    for key in ("j", "pagedown"):
        times = []
        for _ in range(keys):
            t = time.perf_counter()
            await pilot.press(key)
            times.append(time.perf_counter() - t)
        per_key[key] = statistics.mean(times)
    draws = []
    for _ in range(50):
        t = time.perf_counter()
        for y in range(cases.size.height):
            cases.render_line(y)
        draws.append(time.perf_counter() - t)
    return {
        "key_down_s": per_key["j"],
        "key_pagedown_s": per_key["pagedown"],
        "draw_visible_lines_s": statistics.mean(draws),
        "listed": float(cases.count),
    }


def measure(config: Path, keys: int) -> dict[str, float]:
    t = time.perf_counter()
    study = open_study(config)
    opened = time.perf_counter() - t
    assert not study.fitted_now, "expected the cached snapshot"
    result = asyncio.run(_measure(study, keys))
    return {"cases": float(study.snapshot.n_cases), "open_s": opened, **result}


def main(argv: list[str] | None = None) -> dict[str, Any]:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=850_000)
    parser.add_argument("--small", type=int, default=1_000)
    parser.add_argument("--keys", type=int, default=60, help="presses of each key measured")
    parser.add_argument("--json", action="store_true", help="print the results as JSON")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="cc-tui-bench-") as tmp:
        work = Path(tmp)
        base_config = write_demo(work / "demo", cases=5000, seed=7)
        open_study(base_config)
        results = {}
        for n in (args.small, args.cases):
            config = tiled_study(base_config.parent, work, n)
            results[str(n)] = measure(config, args.keys)
    small, large = results[str(args.small)], results[str(args.cases)]
    ratios = {
        k: large[k] / small[k]
        for k in (
            "first_paint_s",
            "measures_ready_s",
            "key_down_s",
            "key_pagedown_s",
            "draw_visible_lines_s",
            "filter_s",
            "case_open_first_s",
            "case_open_next_s",
        )
    }
    report = {"sizes": results, "ratio_large_to_small": ratios, "terminal": list(SIZE)}
    if args.json:
        print(json.dumps(report, indent=2))
    else:
        for n, r in results.items():
            print(
                f"{int(float(n)):>9,} cases: open {r['open_s'] * 1000:7.1f} ms  "
                f"first paint {r['first_paint_s'] * 1000:7.1f} ms  "
                f"measures {r['measures_ready_s'] * 1000:7.1f} ms  "
                f"key j {r['key_down_s'] * 1000:6.1f} ms  "
                f"pagedown {r['key_pagedown_s'] * 1000:6.1f} ms  "
                f"draw {r['draw_visible_lines_s'] * 1000:6.2f} ms  "
                f"filter {r['filter_s'] * 1000:6.1f} ms  "
                f"case {r['case_open_first_s'] * 1000:6.1f}/{r['case_open_next_s'] * 1000:.1f} ms  "
                f"({int(r['listed']):,} listed)"
            )
        print(
            "ratio large/small: "
            + "  ".join(f"{k.removesuffix('_s')} {v:.2f}" for k, v in ratios.items())
        )
    return report


if __name__ == "__main__":
    main()

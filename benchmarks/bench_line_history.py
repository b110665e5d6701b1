"""The line history: how soon drifts are seen, how often a stable line raises a false alarm, and how
fast the results store takes records.

Run:  python benchmarks/bench_line_history.py [--store demo_line.sqlite] [--runs 2000]

1. Detection on the demo line. From a store of the demo line
   (demo_captures/make_demo_line.py, stored by `fitkit batch --store`), for
   each quantity and part: the board at which `fitkit trend` first finds a
   drift after the unlogged probe swap (board 101) and after the C22 lot change
   (board 181), as boards after the change.

2. Delay against false alarms, by simulation. The demo's own numbers set the
   simulation: C22's within-process sigma from the first 30 boards, the size of
   the probe swap's step (mean of boards 101-180 minus boards 1-100, in sigma)
   and the lot's drift rate (slope over boards 181-300, in sigma per board).
   For each detector setting (EWMA lambda and L, CUSUM k and h, alone and
   combined as `fitkit trend` runs them) and ``runs`` simulated lines of
   independent normal boards: the false-alarm rate on a stable line (alarms
   per 1000 boards = 1000 / average run length) and the median and 90th
   percentile of the detection delay (boards after the change; runs that
   alarmed before the change are left out and counted).

3. Store write throughput: records (one capture with 15 values each) per
   second into a SQLite file and into a PostgreSQL server started for the
   run (when the postgresql binaries are installed), one capture per
   transaction (as `fitkit check --store` writes) and 200 per transaction
   (as `fitkit batch --store` writes).

Results go to benchmarks/results/line_history.json and line_history.md.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests"))
from _common import clean, fmt, load_average, machine, write_results  # noqa: E402

from fitkit.trends.charts import cusum_signals, ewma_signals, first_signal, process_baseline  # noqa: E402

FIXTURE_CHANGE, LOT_CHANGE, BOARDS = 101, 181, 300
SETTINGS = [  # (label, ewma (lambda, L) or None, cusum (k, h) or None)
    ("EWMA 0.2 / 3 + CUSUM 0.5 / 5 (fitkit trend default)", (0.2, 3.0), (0.5, 5.0)),
    ("EWMA 0.2 / 3", (0.2, 3.0), None),
    ("EWMA 0.1 / 2.814", (0.1, 2.814), None),
    ("EWMA 0.4 / 3.054", (0.4, 3.054), None),
    ("CUSUM 0.5 / 4", None, (0.5, 4.0)),
    ("CUSUM 0.5 / 5", None, (0.5, 5.0)),
    ("CUSUM 0.5 / 6", None, (0.5, 6.0)),
]


def demo_detections(store: str) -> tuple[list[dict], dict]:
    """Detections of `fitkit trend` on the demo store, and the measured sizes of the two changes for C22."""
    from fitkit.line_store import open_store
    from fitkit.trends import ChartSettings, line_trends
    with open_store(store, read_only=True) as s:
        trends = line_trends(s.values_frame(), ChartSettings())
    rows = []
    for t in trends:
        boards = [d["board_index"] + 1 for d in t.detections]
        after_fixture = next((b - FIXTURE_CHANGE for b in boards if b >= FIXTURE_CHANGE), None)
        after_lot = next((b - LOT_CHANGE for b in boards if b >= LOT_CHANGE), None)
        early = [b for b in boards if b < FIXTURE_CHANGE]
        rows.append({"design": t.design, "name": t.name, "kind": t.kind, "detections": boards,
                     "false_before_changes": len(early), "delay_fixture": after_fixture, "delay_lot": after_lot})
    c22 = next(t for t in trends if t.name == "C22")
    x = c22.values
    base = process_baseline(x, ChartSettings().baseline)
    sizes = {"sigma": base.sigma_within, "mean": base.centre,
             "fixture_step_sigma": (x[FIXTURE_CHANGE - 1:LOT_CHANGE - 1].mean() - x[:FIXTURE_CHANGE - 1].mean())
             / base.sigma_within,
             "lot_slope_sigma_per_board": float(np.polyfit(np.arange(LOT_CHANGE - 1, len(x)), x[LOT_CHANGE - 1:], 1)[0])
             / base.sigma_within}
    return rows, sizes


def _signals(x: np.ndarray, ewma_setting, cusum_setting) -> np.ndarray:
    flags = np.zeros(x.shape, bool)
    if ewma_setting:
        flags |= ewma_signals(x, 0.0, 1.0, *ewma_setting)
    if cusum_setting:
        flags |= cusum_signals(x, 0.0, 1.0, *cusum_setting)
    return flags


def simulate(ewma_setting, cusum_setting, sizes: dict, runs: int, seed: int = 1) -> dict:
    """False-alarm rate and detection delays for one detector setting (standardised units)."""
    rng = np.random.default_rng(seed)
    lengths = []
    for _ in range(max(1, runs // 500)):
        first = first_signal(_signals(rng.standard_normal((500, 5000)), ewma_setting, cusum_setting))
        lengths.append(np.where(first < 0, 5000, first + 1))
    arl0 = float(np.concatenate(lengths).mean())
    out = {"arl_in_control": arl0, "false_alarms_per_1000_boards": 1000.0 / arl0}
    watch, before = 150, 50  # boards watched after the change, and in control before it
    for change, shape in (("fixture", "step"), ("lot", "ramp")):
        x = rng.standard_normal((runs, watch + before))
        k = np.arange(watch)
        x[:, before:] += (sizes["fixture_step_sigma"] if shape == "step"
                          else sizes["lot_slope_sigma_per_board"] * (k + 1))
        first = first_signal(_signals(x, ewma_setting, cusum_setting))
        early = (first >= 0) & (first < before)
        delay = (first - before + 1)[(first >= before)]
        out[change] = {"median_delay": float(np.median(delay)) if len(delay) else None,
                       "p90_delay": float(np.percentile(delay, 90)) if len(delay) else None,
                       "alarmed_before_change": float(early.mean()),
                       "missed_within_150": float((first < 0).mean())}
    return out


def store_throughput(url: str, count: int, chunk: int) -> float:
    """Captures per second appended to a fresh store at url, ``chunk`` per transaction."""
    from support.line_store_entries import entry

    from fitkit.line_store import StoredValue, open_store
    extra = tuple(StoredValue("quantity", f"q{j}", 1.0 + j, 0.9, 1.1, "s", True) for j in range(13))
    entries = [entry(i) for i in range(count)]
    entries = [type(e)(**{**e.__dict__, "values": e.values + extra}) for e in entries]
    with open_store(url) as store:
        started = time.perf_counter()
        for start in range(0, count, chunk):
            store.append(entries[start:start + chunk])
        elapsed = time.perf_counter() - started
        assert store.count() == count
    return count / elapsed


def throughput_table(count: int) -> list[dict]:
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for chunk in (1, 200):
            rows.append({"store": "SQLite file", "per_transaction": chunk,
                         "captures_per_s": store_throughput(str(Path(tmp) / f"s{chunk}.sqlite"), count, chunk)})
    try:
        from support.postgres_server import running_server, server_url
        with running_server() as server:
            import psycopg
            for chunk in (1, 200):
                with psycopg.connect(host=server.host, port=server.port, user=server.user, dbname="postgres",
                                     autocommit=True) as conn:
                    conn.execute(f"CREATE DATABASE bench{chunk}")
                rows.append({"store": "PostgreSQL (local server)", "per_transaction": chunk,
                             "captures_per_s": store_throughput(server_url(server, f"bench{chunk}"), count, chunk)})
    except RuntimeError as err:
        rows.append({"store": f"PostgreSQL: not measured ({err})", "per_transaction": None, "captures_per_s": None})
    return rows


def markdown(data: dict) -> str:
    lines = ["# Line history: drift detection and store throughput", "",
             f"Machine: {data['machine'].get('cpu', '')}; load before {data['load_before']}, after {data['load_after']}.",
             ""]
    if data.get("demo"):
        s = data["sizes"]
        lines += [f"## Demo line ({data['store']})", "",
                  f"C22: within-process sigma {s['sigma'] * 1e9:.3g} nF ({100 * s['sigma'] / s['mean']:.2g} % of its "
                  f"mean); probe swap: a step of {s['fixture_step_sigma']:.2f} sigma; new lot: "
                  f"{s['lot_slope_sigma_per_board']:.3f} sigma per board.", "",
                  "| quantity | drifts found at boards | false before board 101 | boards after the probe swap (101) "
                  "| boards after the lot change (181) |", "| --- | --- | --- | --- | --- |"]
        for r in data["demo"]:
            lines.append(f"| {r['name']} | {', '.join(map(str, r['detections'])) or '-'} | {r['false_before_changes']} "
                         f"| {fmt(r['delay_fixture'], 'd') if r['delay_fixture'] is not None else '-'} "
                         f"| {fmt(r['delay_lot'], 'd') if r['delay_lot'] is not None else '-'} |")
        lines += ["", f"## Delay against false alarms ({data['runs']} simulated lines per cell, C22's sizes)", "",
                  "| detector (lambda / L, k / h) | false alarms per 1000 stable boards | probe swap: median (90 %) "
                  "delay, boards | lot drift: median (90 %) delay, boards |", "| --- | --- | --- | --- |"]
        for r in data["simulation"]:
            lines.append(f"| {r['label']} | {r['false_alarms_per_1000_boards']:.2f} | "
                         f"{fmt(r['fixture']['median_delay'], '.0f')} ({fmt(r['fixture']['p90_delay'], '.0f')}) | "
                         f"{fmt(r['lot']['median_delay'], '.0f')} ({fmt(r['lot']['p90_delay'], '.0f')}) |")
    lines += ["", f"## Store write throughput ({data['throughput_count']} captures of 15 values each)", "",
              "| store | captures per transaction | captures per second |", "| --- | --- | --- |"]
    for r in data["throughput"]:
        lines.append(f"| {r['store']} | {r['per_transaction'] or '-'} | {fmt(r['captures_per_s'], '.0f')} |")
    return "\n".join(lines) + "\n"


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--store", help="store of the demo line (default: benchmarks/data/demo_line.sqlite)")
    parser.add_argument("--runs", type=int, default=2000, help="simulated lines per detector setting")
    parser.add_argument("--count", type=int, default=2000, help="captures written per throughput cell")
    args = parser.parse_args(argv)
    store = args.store or str(HERE / "data" / "demo_line.sqlite")
    shown = os.path.relpath(store, HERE.parent) if Path(store).is_absolute() else store
    data = {"machine": machine(), "load_before": load_average(), "store": shown, "runs": args.runs,
            "throughput_count": args.count}
    if Path(store).exists():
        data["demo"], data["sizes"] = demo_detections(store)
        data["simulation"] = [dict(label=label, **simulate(e, c, data["sizes"], args.runs))
                              for label, e, c in SETTINGS]
    data["throughput"] = throughput_table(args.count)
    data["load_after"] = load_average()
    jpath, mpath = write_results("line_history", clean(data), markdown(data))
    print(mpath.read_text())


if __name__ == "__main__":
    main()

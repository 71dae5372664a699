"""Run every benchmark, print each one's figures beside its goals and ceilings, and end with
a summary: each headline figure on one line with its goal and its ceiling side by side.

python tests/bench/run.py            # full size
python tests/bench/run.py --quick    # small inputs, to check the benchmarks still run
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_abuse
import bench_archive
import bench_busy
import bench_capture
import bench_client
import bench_decode
import bench_demo
import bench_modal
import bench_phone
import bench_pull
import bench_service
import bench_size
import bench_spectra
import bench_startup
import bench_text_input
import bench_view
from table import Figure, summary


@dataclass(frozen=True)
class Bench:
    """One benchmark: `run(quick)` gives its rows, `show` prints them, `headline` picks the
    figures of the summary (each with goal and ceiling)."""

    title: str
    run: Callable[[bool], list[Any]]
    show: Callable[[list[Any]], None]
    headline: Callable[[list[Any]], list[Figure]]


BENCHES = [
    Bench("device link: binary frames", lambda q: bench_decode.run(4.0 if q else 64.0),
          bench_decode.show, bench_decode.headline),
    Bench("device link: text lines", lambda q: bench_text_input.run(),
          bench_text_input.show, bench_text_input.headline),
    Bench("spectra: per-hit update", lambda q: bench_spectra.run(20 if q else 200),
          bench_spectra.show, bench_spectra.headline),
    Bench("service: pulls over loopback, empty changes poll",
          lambda q: bench_service.run(20 if q else 200), bench_service.show,
          bench_service.headline),
    Bench("service under abuse: a paired client beside idle connections, the log's growth",
          lambda q: bench_abuse.run(3.0 if q else 10.0, 10.0 if q else 70.0),
          bench_abuse.show, bench_abuse.headline),
    Bench("point-set size: 2 responses, 16k block", lambda q: bench_size.run(),
          lambda rows: bench_size.show(rows, decimals=3), bench_size.headline),
    Bench("capture under a busy lab: 20 pulling, 200 listening, taps going on",
          lambda q: bench_busy.run(10.0 if q else 60.0), bench_busy.show, bench_busy.headline),
    # A new benchmark goes here: a module with run(), show(rows) and headline(rows) -> Figures.
    Bench("client: full pull into an empty mirror", lambda q: bench_pull.run(20 if q else 200),
          lambda rows: bench_pull.show(rows, decimals=2), bench_pull.headline),
    Bench("archive: many rigs into PostgreSQL, one test read back",
          lambda q: bench_archive.run(3, 20, 5_000) if q else bench_archive.run(),
          lambda rows: bench_archive.show(rows, decimals=2), bench_archive.headline),
    Bench("client: quick-look check, exports, plots",
          lambda q: bench_client.run(30 if q else 210), bench_client.show, bench_client.headline),
    Bench("client: modal fit (pLSCF, stabilization, LSFD), scaling, Monte-Carlo",
          bench_modal.run, bench_modal.show, bench_modal.headline),
    Bench("the one-command demo", lambda q: bench_demo.run(), bench_demo.show,
          bench_demo.headline),
    Bench("capture: daemon CPU, memory, per-hit latency",
          lambda q: bench_capture.run(2.0 if q else 10.0, 5 if q else 20),
          bench_capture.show, bench_capture.headline),
    Bench("start-up: until the rig is announced", lambda q: bench_startup.run(2 if q else 5),
          lambda rows: bench_startup.show(rows, decimals=2), bench_startup.headline),
    Bench("phone page: tap to plots in headless Chromium, page weight",
          lambda q: bench_phone.run(3 if q else 10), bench_phone.show, bench_phone.headline),
    Bench("view page: 500 points to first animated frame, frame rate, page weight",
          lambda q: bench_view.run(1 if q else 3), bench_view.show, bench_view.headline),
]  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description="taprig benchmarks")
    parser.add_argument("--quick", action="store_true", help="small inputs, figures not meaningful")
    quick = parser.parse_args().quick
    figures: list[Figure] = []
    for bench in BENCHES:
        print(f"== {bench.title}")
        rows = bench.run(quick)
        bench.show(rows)
        figures += bench.headline(rows)
    print("== summary: each figure beside its goal and its ceiling (best possible, same run)")
    summary(figures)


if __name__ == "__main__":
    main()

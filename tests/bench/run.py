"""Run every benchmark and print each figure beside its goal or ceiling.

python tests/bench/run.py            # full size
python tests/bench/run.py --quick    # small inputs, to check the benchmarks still run
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_capture
import bench_client
import bench_decode
import bench_demo
import bench_phone
import bench_pull
import bench_service
import bench_spectra
import bench_text_input


def main() -> None:
    parser = argparse.ArgumentParser(description="taprig benchmarks")
    parser.add_argument("--quick", action="store_true", help="small inputs, figures not meaningful")
    quick = parser.parse_args().quick
    print("== device link: binary frames")
    bench_decode.show(bench_decode.run(4.0 if quick else 64.0))
    print("== device link: text lines")
    bench_text_input.main()
    print("== spectra: per-hit update")
    bench_spectra.show(bench_spectra.run(20 if quick else 200))
    print("== service: pulls over loopback, empty changes poll")
    bench_service.show(bench_service.run(20 if quick else 200))
    print("== client: full pull into an empty mirror")
    bench_pull.show(bench_pull.run(20 if quick else 200), decimals=2)
    print("== client: quick-look check, exports, plots")
    bench_client.show(bench_client.run(30 if quick else 210))
    print("== the one-command demo")
    bench_demo.show(bench_demo.run())
    print("== capture: daemon CPU, memory, per-hit latency")
    bench_capture.show(bench_capture.run(2.0 if quick else 10.0, 5 if quick else 20))
    print("== phone page: tap to plots in headless Chromium, page weight")
    bench_phone.show(bench_phone.run(3 if quick else 10))


if __name__ == "__main__":
    main()

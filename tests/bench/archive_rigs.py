"""Simulated rigs for bench_archive.py, in a process of their own (so that serving them does not
share the archive follower's interpreter): `rigs` real rigs (real store, real service on
loopback, simulated test piece at 1 kHz), each filled with one test of `sets` point sets of
2 responses × `lines` lines. Prints one JSON line (url, token, rig id of each rig) when they
serve, and stops them when its stdin closes.

Run: python tests/bench/archive_rigs.py --rigs 20 --sets 200 --lines 2049 --folder DIR
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from client.archive.conftest import commit_sets, serve_rig


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rigs", type=int, default=20)
    parser.add_argument("--sets", type=int, default=200)
    parser.add_argument("--lines", type=int, default=2049)
    parser.add_argument("--folder", type=Path, required=True)
    args = parser.parse_args()
    served = []
    try:
        for k in range(args.rigs):
            rig = serve_rig(args.folder / f"rig-{k + 1}", f"sim-{k + 1}")
            served.append(rig)
            commit_sets(rig.running, "bench", args.sets, n_freq=args.lines, seed=k)
        rows = [{"url": r.url, "token": r.token, "rig_id": r.rig_id} for r in served]
        print(json.dumps({"rigs": rows}), flush=True)
        sys.stdin.read()  # until the benchmark closes our stdin
    finally:
        for r in served:
            r.loop.close()
            r.running.close()


if __name__ == "__main__":
    main()

"""Capture benchmarks: daemon CPU share and peak memory while streaming, per-hit latency.

1. `taprigd run` in its own process reads 4 channels × 51.2 kHz int24 from the
   simulated test piece (in this process) over a pseudo-terminal. Its CPU share,
   its link process's included (device.reader = "process"), is read from
   /proc/<pid>/stat over a fixed window, with no hits and then with one hit a
   second; peak RSS from /proc/<pid>/status (VmHWM), of the daemon and of its link
   process apart. Goals: CPU at most 2 % of one core idle; peak RSS of the capture
   side at most 60 MB, where the capture side is the daemon with its link process
   (the rig's processing runs in the daemon). Ceilings, measured in the same run: a
   process that only reads
   the same stream with pyserial and throws it away (no decoding), and the peak
   RSS of the interpreter importing what `taprigd run` imports, then exiting.
2. Per-hit latency, block 16384 × 4 channels, in process: from the moment the
   bytes completing a record are taken off the link queue to the point set's
   commit (averages = 1, so every hit commits), median beside a bare numpy
   rfft of the same (4, 16384) array. The reader batches bytes for up to
   READ_TIMEOUT_S before handing them over; half of that is added on average
   (all of it at worst). Goal: median at most 10 ms plus that batching.

Run: python tests/bench/bench_capture.py [--seconds 10]
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from table import Figure, Row, pick, show

from taprig.daemon.capture.link import READ_TIMEOUT_S
from taprig.daemon.config import load_config
from taprig.daemon.lifespan import start_rig
from taprig.daemon.records import GridPoint
from taprig.firmware_protocol.simpiece import ModalModel, demo_panel
from taprig.firmware_protocol.simpiece.instrument import InstrumentSettings, open_simulated

TICK = os.sysconf("SC_CLK_TCK")
CHANNELS_TOML = """
[[channels]]
index = 0
role = "force"
label = "hammer"
sensitivity = 2.25
unit = "mV/N"
""" + "".join(
    f"""
[[channels]]
index = {i}
role = "response"
label = "acc{i}"
sensitivity = 1.02
unit = "mV/(m/s^2)"
"""
    for i in (1, 2, 3)
)


def four_channel_panel() -> ModalModel:
    """The demo panel with a third accelerometer (on grid point D5): 4 channels in all."""
    m = demo_panel()
    return dataclasses.replace(m, sensors={**m.sensors, "acc3": "D5"})


def sensor_places(model: ModalModel) -> list[str]:
    """--sensor-at for each of the model's sensors, at its x,y,z (some are off the grid)."""
    places: list[str] = []
    for sensor, point in model.sensors.items():
        x, y, z = (float(v) for v in model.coords[model.index(point)])
        places += ["--sensor-at", f"{sensor}={x:.4f},{y:.4f},{z:.4f}/+z"]
    return places


def cpu_seconds(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / TICK  # utime + stime


def children(pid: int) -> list[int]:
    """The child processes of `pid` (Linux: /proc/<pid>/task/<tid>/children)."""
    found: list[int] = []
    for task in Path(f"/proc/{pid}/task").iterdir():
        found += [int(c) for c in (task / "children").read_text().split()]
    return found


def family_cpu_seconds(pid: int) -> float:
    """CPU seconds of `pid` and of its living children."""
    return cpu_seconds(pid) + sum(cpu_seconds(c) for c in children(pid))


def peak_rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")


# The floor of any reader: pyserial reads the stream and drops it. Sends IDENTIFY and START
# as the rig does, then reports its own CPU seconds per wall second.
READER = """
import os, sys, time, serial
from taprig.firmware_protocol import Command, FrameEncoder, Opcode
port = serial.serial_for_url(sys.argv[1], timeout=0.05)
enc = FrameEncoder()
port.write(enc.command(Command(Opcode.IDENTIFY, 1)) + enc.command(Command(Opcode.START, 2)))
t0, c0 = time.monotonic(), sum(os.times()[:2])
while time.monotonic() - t0 < float(sys.argv[2]):
    port.read(65536)
print((sum(os.times()[:2]) - c0) / (time.monotonic() - t0))
"""
IMPORTS = ("import taprig.daemon.cli, taprig.daemon.config, taprig.daemon.lifespan, "
           "taprig.daemon.run, taprig.daemon.api.service, "
           "taprig.firmware_protocol.simpiece.instrument")  # fmt: skip


def bare_reader_cpu(url: str, seconds: float) -> float:
    out = subprocess.run([sys.executable, "-c", READER, url, str(seconds)], check=True,
                         capture_output=True, text=True, timeout=seconds + 30)  # fmt: skip
    return float(out.stdout)


def imports_peak_rss_mb() -> float:
    code = IMPORTS + "; print(open('/proc/self/status').read())"
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                         text=True, timeout=60)  # fmt: skip
    line = next(x for x in out.stdout.splitlines() if x.startswith("VmHWM:"))
    return int(line.split()[1]) / 1024


def daemon_cpu_and_memory(seconds: float) -> list[Row]:
    model = four_channel_panel()
    with tempfile.TemporaryDirectory() as tmp:
        link = Path(tmp) / "ttyBENCH"
        piece = open_simulated("pty", link=str(link), model=model)
        cfg = Path(tmp) / "taprigd.toml"
        cfg.write_text(
            f'[device]\nurl = "{link}"\n[store]\ndata_dir = "{tmp}"\nmin_free_mb = 1\n'
            '[service]\nbind = "127.0.0.1"\nport = 0\nadvertise = false\n' + CHANNELS_TOML
        )
        grid = Path(tmp) / "grid.csv"
        grid.write_text("label,x,y,z\n" + "".join(
            f"{lab},{model.coords[model.index(lab)][0]},{model.coords[model.index(lab)][1]},0\n"
            for lab in model.grid
        ))  # fmt: skip
        log = Path(tmp) / "taprigd.log"
        with log.open("w") as log_file:
            proc = subprocess.Popen(
                [sys.executable, "-m", "taprig.daemon", "run", "-c", str(cfg), "--test", "bench",
                 "--grid", str(grid), *sensor_places(model)],
                stdout=subprocess.DEVNULL, stderr=log_file,
            )  # fmt: skip
        try:
            deadline = time.monotonic() + 30
            while "armed; test bench" not in log.read_text():  # the daemon says it has armed
                if proc.poll() is not None or time.monotonic() > deadline:
                    raise RuntimeError(f"taprigd did not arm:\n{log.read_text()}")
                time.sleep(0.05)
            time.sleep(1.0)  # let start-up work settle before measuring
            c0, t0 = family_cpu_seconds(proc.pid), time.monotonic()
            link0 = sum(cpu_seconds(c) for c in children(proc.pid))
            time.sleep(seconds)
            idle = (family_cpu_seconds(proc.pid) - c0) / (time.monotonic() - t0)
            link_cpu = (sum(cpu_seconds(c) for c in children(proc.pid)) - link0) / (
                time.monotonic() - t0
            )
            c0, t0 = family_cpu_seconds(proc.pid), time.monotonic()
            k = 0
            while time.monotonic() - t0 < seconds:
                piece.tap(model.grid[k % len(model.grid)])
                k += 1
                time.sleep(1.0)
            busy = (family_cpu_seconds(proc.pid) - c0) / (time.monotonic() - t0)
            rss = peak_rss_mb(proc.pid)
            link_rss = sum(peak_rss_mb(c) for c in children(proc.pid))
        finally:
            proc.terminate()
            proc.wait(timeout=10)
        try:
            reader = bare_reader_cpu(str(link), seconds)
        finally:
            piece.close()
    return [
        ("daemon CPU, streaming, no hits", 100 * idle, "% core",
         f"goal <= 2 %; its link process {100 * link_cpu:.1f} % of it"),
        ("daemon CPU, streaming, 1 hit/s", 100 * busy, "% core", "with the link process"),
        ("ceiling: pyserial read of the stream alone", 100 * reader, "% core", "no decoding"),
        ("capture side peak RSS while capturing", rss + link_rss, "MB",
         f"goal <= 60 MB; daemon {rss:.1f} + link process {link_rss:.1f}"),
        ("ceiling: interpreter + the daemon's imports", imports_peak_rss_mb(), "MB",
         "peak RSS, nothing running"),
    ]  # fmt: skip


def hit_latency(hits: int) -> list[Row]:
    model = four_channel_panel()
    with tempfile.TemporaryDirectory() as tmp:
        cfg_file = Path(tmp) / "c.toml"
        cfg_file.write_text(CHANNELS_TOML)
        cfg = load_config(
            cfg_file,
            [f"store.data_dir={tmp}", "capture.block=16384", "capture.averages=1",
             "store.min_free_mb=1", "device.url=simulated"],
        )  # fmt: skip
        r = start_rig(cfg, InstrumentSettings(), model=model)
        try:
            deadline = time.monotonic() + 10
            while r.rig.view().info is None and time.monotonic() < deadline:
                time.sleep(0.01)
            grid = [GridPoint(p, *map(float, model.coords[model.index(p)])) for p in model.grid]
            r.rig.create_test("latency", grid)
            r.rig.select_test("latency")
            r.rig.arm()
            assert r.instrument is not None
            for k in range(hits):
                before = r.rig.view().commits
                r.instrument.tap(r.rig.snapshot()["point"])
                deadline = time.monotonic() + 5
                while r.rig.view().commits == before:
                    assert time.monotonic() < deadline, f"hit {k} never committed"
                    time.sleep(0.005)
                time.sleep(0.05)
            lat = np.array(r.rig.view().commit_latency_s) * 1e3
        finally:
            r.close()
    arr = np.random.default_rng(0).normal(size=(4, 16384))
    t0 = time.perf_counter()
    for _ in range(50):
        np.fft.rfft(arr, axis=-1)
    rfft_ms = (time.perf_counter() - t0) / 50 * 1e3
    batch_ms = READ_TIMEOUT_S * 1e3  # the reader hands bytes over at least this often
    return [
        ("per-hit latency, queue to commit, median", float(np.median(lat)), "ms",
         f"goal <= 10 ms plus the link's batching; p90 {np.percentile(lat, 90):.1f} ms "
         f"over {lat.size} hits"),
        (f"  + link read batching (0..{batch_ms:.0f} ms), median",
         float(np.median(lat)) + batch_ms / 2, "ms",
         f"worst case {float(np.median(lat)) + batch_ms:.1f} ms"),
        ("bare numpy rfft of (4, 16384)", rfft_ms, "ms", "the FFT alone"),
    ]  # fmt: skip


def run(seconds: float = 10.0, hits: int = 20) -> list[Row]:
    return daemon_cpu_and_memory(seconds) + hit_latency(hits)


def headline(rows: list[Row]) -> list[Figure]:
    reader, floor = pick(rows, "ceiling: pyserial"), pick(rows, "ceiling: interpreter")
    rfft = pick(rows, "bare numpy rfft")
    return [
        Figure("CPU share, streaming, no hits", pick(rows, "daemon CPU, streaming, no"),
               "% core", "<=", 2.0, reader, "pyserial read alone"),
        Figure("per-hit latency, queue to commit, median", pick(rows, "per-hit latency"),
               "ms", "<=", 10.0, rfft, "bare rfft of the record"),
        Figure("capture side peak RSS", pick(rows, "capture side peak RSS"), "MB", "<=", 60.0,
               floor, "interpreter + imports"),
    ]  # fmt: skip


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0)
    parser.add_argument("--hits", type=int, default=20)
    args = parser.parse_args()
    show(run(args.seconds, args.hits))

"""Benchmark: sustained live rate through a pseudo-terminal, and a memory soak.

The simulated cell (invented data) runs as its own process (``forcelens simulate``),
like a real device, and streams binary frames to a pseudo-terminal; in this process a
`ui.session.LiveSession` reads it through pyserial, decodes, estimates force and
records the run, exactly as ``forcelens live --record`` does. Two passes on the same
stream, in this run:

* baseline: reading and decoding only (no estimation, no recording);
* full: decode + estimate + record.

For each pass it prints the samples received, the backlog still waiting in the reader at
the end (0 when the consumer keeps up), the samples lost, and this process's CPU time per
second of data; the ratio full/baseline is the cost of estimation and recording, and
1 / (CPU fraction) the headroom over the sample rate. Not a test; run it by hand:

    python tests/benchmarks/bench_live.py [--rate HZ] [--seconds S]     # target: 50 kHz, 60 s
    python tests/benchmarks/bench_live.py --soak [--rate 20000] [--seconds 600]

``--soak`` runs only the full pass and prints the resident memory every 30 s; the
target is growth below 10 MB and no loss.
"""

from __future__ import annotations

import argparse
import dataclasses
import re
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from estimator.profile import default_demo_profile, save_profile
from ui.recording import open_recording
from ui.session import POLL_PERIOD_S, LiveSession

# Invented load programme, 10 s, repeated with fresh noise.
PROGRAMME = "hold 1 0; hold 2 30; hold 2 90; ramp 1 50; hold 2 50; hold 2 0"


def rss_mb() -> float:
    """Resident set size now, MB (Linux /proc)."""
    with open("/proc/self/status", encoding="ascii") as fh:
        for line in fh:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024.0
    return float("nan")


def one_pass(rate_hz: float, seconds: float, *, full: bool, soak: bool, framing: str) -> dict:
    """Stream for `seconds` from a simulator process; consume with or without estimation."""
    base = default_demo_profile()
    acq = dataclasses.replace(base.acquisition, sample_rate_hz=rate_hz, framing=framing)
    profile = base.with_updates(acquisition=acq)
    with tempfile.TemporaryDirectory() as tmp:
        profile_path = Path(tmp) / "cell.toml"
        save_profile(profile, profile_path)
        # The device: `forcelens simulate` in its own process, like real hardware.
        sim = subprocess.Popen(
            [sys.executable, "-m", "ui.cli", "simulate", "--profile", str(profile_path),
             "--programme", PROGRAMME, "--loop", "--start-delay", "1.5"],
            stdout=subprocess.PIPE, text=True,
        )  # fmt: skip
        try:
            port = re.search(r"on (\S+)", sim.stdout.readline()).group(1)
            runs = Path(tmp) / "runs"
            recording = open_recording(runs, profile, note="benchmark") if full else None
            session = LiveSession(profile, port, recording=recording)
            session.start()
            while not session.connected_once:
                session.poll()
                time.sleep(0.01)
            while session.reader.stats().bytes_read == 0:  # the simulator's start delay
                session.poll()
                time.sleep(0.001)
            cpu0 = time.process_time()
            t0 = time.monotonic()
            received = 0
            next_report = 30.0
            rss = [(0.0, rss_mb())]
            while (elapsed := time.monotonic() - t0) < seconds:
                polled = time.monotonic()
                if full:
                    n = session.poll().samples.size
                else:
                    n = session.reader.drain().size
                    session.reader.drain_events()
                received += n
                if soak and elapsed >= next_report:
                    rss.append((elapsed, rss_mb()))
                    print(f"  {elapsed:6.0f} s  RSS {rss[-1][1]:7.1f} MB  received {received}")
                    next_report += 30.0
                # paced as `forcelens live` polls (ui.session.POLL_PERIOD_S)
                time.sleep(max(0.0, POLL_PERIOD_S - (time.monotonic() - polled)))
            cpu = time.process_time() - cpu0
            wall = time.monotonic() - t0
            backlog = session.reader.stats().samples_unread
            sim.terminate()
            sim.wait(10)
            summary = session.close("complete", reason="benchmark")
        finally:
            if sim.poll() is None:
                sim.kill()
    span = summary["samples"] + summary["samples_lost"]
    return {
        "received": received,
        "backlog": backlog,
        "lost": summary["samples_lost"],
        "span": span,
        "cpu_per_data_s": cpu / wall,
        "rate": received / wall,
        "rss": rss,
        "maxrss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rate", type=float, default=None, help="sample rate, Hz")
    ap.add_argument("--seconds", type=float, default=None, help="duration of each pass, s")
    ap.add_argument("--framing", default="binary-24")
    ap.add_argument("--soak", action="store_true", help="memory soak (full pass only)")
    args = ap.parse_args(argv)
    rate = args.rate or (20_000.0 if args.soak else 50_000.0)
    seconds = args.seconds or (600.0 if args.soak else 60.0)
    print(f"{args.framing} at {rate:g} Hz for {seconds:g} s per pass (invented data)")
    if args.soak:
        r = one_pass(rate, seconds, full=True, soak=True, framing=args.framing)
        growth = r["rss"][-1][1] - r["rss"][1][1] if len(r["rss"]) > 2 else float("nan")
        print(
            f"soak: received {r['received']}, lost {r['lost']}, RSS growth after the first "
            f"30 s {growth:+.1f} MB (target < 10 MB), peak RSS {r['maxrss_mb']:.0f} MB, "
            f"CPU {100 * r['cpu_per_data_s']:.1f} % of one core"
        )
        return 0 if r["lost"] == 0 else 1
    results = {}
    for name, full in (("baseline (read + decode)", False), ("full (+ estimate + record)", True)):
        r = one_pass(rate, seconds, full=full, soak=False, framing=args.framing)
        results[name] = r
        print(
            f"{name:28s} received {r['received']:>10d}  backlog {r['backlog']:>7d}  "
            f"lost {r['lost']:>4d}  "
            f"{r['rate']:>9.0f} S/s  CPU {100 * r['cpu_per_data_s']:5.1f} % of a core  "
            f"(headroom {1 / max(r['cpu_per_data_s'], 1e-9):5.1f}x)"
        )
    b, f = results.values()
    print(
        f"ratio full/baseline CPU: {f['cpu_per_data_s'] / b['cpu_per_data_s']:.2f}; "
        f"full pass rate / target: {f['rate'] / rate:.3f}; zero loss: {f['lost'] == 0}"
    )
    return 0 if f["lost"] == 0 else 1


if __name__ == "__main__":
    sys.exit(main())

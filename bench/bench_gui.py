"""Workbench bench: edit-to-sound time and GUI frame rate while playing.

The workbench plays through its live host process
(:class:`solderless.engine.live.remote.HostProcess`), started the way the Play button
starts it, but with no sound card: the child process runs the audio path on
a real-time paced clock (``LiveHost.start_paced``: one 128-sample block every
2.67 ms at 48 kHz). A block that starts later than one block period after its
due time counts as an xrun (the clock resynchronises like a sound card).

* edit-to-sound: from a value edit made through the workbench (the call a
  value field makes on Enter) to the start of the first audio block in the
  host process that runs with the new element values (the host stamps both
  ends on the system-wide monotonic clock).
* frame rate: meter/trace/scope redraws per second of the window's meter
  timer (period ``solderless.gui.window.METER_MS``, 30 ms) while the host plays.
* xruns: counted by the host process, first for 3 s with the window idle
  (meter timer off: the machine's own baseline), then during the run.

Prints a table and writes bench/results/gui.json. Run:
``QT_QPA_PLATFORM=offscreen python bench/bench_gui.py [--seconds 10] [--design flagship]``
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--design", default="flagship")
    ap.add_argument("--seconds", type=float, default=10.0)
    ap.add_argument("--edits", type=int, default=30)
    ap.add_argument("--source", default="synth:chords")
    ap.add_argument("--no-meters", action="store_true",
                    help="baseline: play without the meter timer (no GUI redraws)")
    ap.add_argument("--out", default=str(Path(__file__).resolve().parent / "results" / "solderless.gui.json"))
    args = ap.parse_args(argv)

    import numpy as np
    from PyQt6.QtCore import QEventLoop, QTimer
    from solderless.engine.design import load_design
    from solderless.engine.values import step_preferred
    from solderless.gui.app import make_window, tune_interpreter
    from solderless.gui.window import METER_MS

    tune_interpreter()                       # what `solderless gui` does
    cfg = Path(tempfile.mkdtemp(prefix="solderless-bench-"))
    design = load_design(args.design)
    win = make_window(design, config=cfg, recover="no", seconds=1.0, source=args.source)
    win.ask = lambda _q: "discard"
    win.show()
    win.wait_idle(300)
    i = win.live.source.findData(args.source)
    if i < 0:
        win.live.source.addItem(args.source, args.source)
        i = win.live.source.findData(args.source)
    win.live.source.setCurrentIndex(i)
    win.wait_idle(300)

    win.live_driver = "paced"
    t_build = time.perf_counter()
    win.start_live()
    if not win.wait_live(300):
        print("the live host did not start")
        return 1
    t_build = time.perf_counter() - t_build
    h = win.host
    fs, block = h.fs, h.block
    period = block / fs
    frames = []
    orig_poll = win._poll_meters

    def counted_poll():
        t0 = time.perf_counter()
        orig_poll()
        frames.append((t0, time.perf_counter() - t0))
    win.meter_timer.stop()
    win.meter_timer.timeout.disconnect()
    win.meter_timer.timeout.connect(counted_poll)
    loop = QEventLoop()

    def pump(seconds):
        t_end = time.perf_counter() + seconds
        while time.perf_counter() < t_end:
            loop.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 10)
            time.sleep(0.001)

    # baseline: the host process plays while the window is idle
    pump(0.5)
    s0 = h.state()
    pump(3.0)
    s1 = h.state()
    baseline_late, baseline_blocks = s1["xruns"] - s0["xruns"], s1["blocks"] - s0["blocks"]
    if not args.no_meters:
        win.meter_timer.start(METER_MS)

    # value edits from the GUI thread, spread over the run
    edits: list[float] = []
    parts = [p.qualname for p in win.wb.design.parts()
             if p.type in ("resistor", "capacitor") and p.value]
    target = "detector.CT" if "detector.CT" in parts else parts[0]
    n_before = len(h.call("edit_landings"))

    def do_edit():
        if len(edits) >= args.edits:
            return
        v = win.wb.design.part(target).value
        nv = step_preferred(v, "E24", 1 if len(edits) % 2 == 0 else -1)
        edits.append(time.perf_counter())
        win.wb.set_value(target, nv)
    edit_timer = QTimer()
    edit_timer.timeout.connect(do_edit)
    edit_timer.start(int(1000 * args.seconds / (args.edits + 2)))

    s2 = h.state()
    t_start = time.perf_counter()
    pump(args.seconds)
    edit_timer.stop()
    s3 = h.state()
    elapsed = time.perf_counter() - t_start
    pump(1.0)                                   # let the last edits land
    win.meter_timer.stop()
    snap = h.meters()
    land = h.call("edit_landings")[n_before:]
    run_late, run_blocks = s3["xruns"] - s2["xruns"], s3["blocks"] - s2["blocks"]

    e2s = np.array([tb - t0 for t0, (_ta, tb) in zip(edits, land)]) * 1e3
    ft = np.array([f[0] for f in frames])
    in_run = ft[(ft >= t_start) & (ft <= t_start + args.seconds)]
    fps = (len(in_run) - 1) / (in_run[-1] - in_run[0]) if len(in_run) > 1 else 0.0
    redraw_ms = np.array([f[1] for f in frames]) * 1e3
    cpu = snap["session"]["cpu_load"]
    win.stop_live()
    win.close()

    def q(a, p):
        return float(np.percentile(a, p)) if len(a) else None
    res = {
        "design": args.design, "fs": fs, "block": block, "source": args.source,
        "seconds": args.seconds,
        "driver": "live host process, paced clock (no sound card)",
        "host_start_s": round(t_build, 3),
        "edits": int(len(e2s)), "edited_part": target,
        "edit_to_sound_ms": {"median": q(e2s, 50), "p95": q(e2s, 95),
                             "max": float(e2s.max()) if len(e2s) else None},
        "gui_fps": round(float(fps), 1),
        "redraw_ms": {"median": q(redraw_ms, 50), "p95": q(redraw_ms, 95)},
        "blocks": int(run_blocks), "late_blocks_xruns": int(run_late),
        "baseline_idle_window": {"seconds": 3.0, "blocks": int(baseline_blocks),
                                 "late_blocks": int(baseline_late)},
        "realtime_blocks_expected": int(elapsed / period),
        "host_cpu_per_block": cpu,
        "targets": {"edit_to_sound_ms": 30, "gui_fps": 30, "xruns": 0},
        "machine": {"python": platform.python_version(), "cpus": os.cpu_count(),
                    "platform": platform.platform(),
                    "load_average": list(os.getloadavg())},
    }
    nan = float("nan")
    print(f"{'measure':<38}{'value':>12}   target")
    print(f"{'edit-to-sound median (ms)':<38}{res['edit_to_sound_ms']['median'] or nan:>12.2f}   <= 30")
    print(f"{'edit-to-sound p95 (ms)':<38}{res['edit_to_sound_ms']['p95'] or nan:>12.2f}   <= 30")
    print(f"{'edit-to-sound max (ms)':<38}{res['edit_to_sound_ms']['max'] or nan:>12.2f}")
    print(f"{'GUI frames per second':<38}{res['gui_fps']:>12.1f}   >= 30")
    print(f"{'meter+trace+scope redraw median (ms)':<38}{res['redraw_ms']['median'] or nan:>12.2f}")
    print(f"{'late blocks (xruns), window live':<38}{run_late:>12d}   0")
    print(f"{'late blocks, window idle, 3 s':<38}{baseline_late:>12d}   (machine baseline)")
    print(f"{'blocks run / real-time expected':<38}{run_blocks:>5d} / {res['realtime_blocks_expected']}")
    if cpu["blocks"]:
        print(f"{'host CPU per block median/p99/max':<38}{100 * cpu['median']:>5.0f}/"
              f"{100 * cpu['p99']:.0f}/{100 * cpu['max']:.0f} %")
    print(f"{'load average (1/5/15 min)':<38}{' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(res, indent=2))
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

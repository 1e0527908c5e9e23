"""Workbench bench: edit-to-sound time and GUI frame rate while playing.

No sound card is needed: a driver thread stands in for the audio callback and
calls the live host's block function (``LiveHost.run_offline(1)``) paced at
real time (one 128-sample block every 2.67 ms at 48 kHz). A block that
starts later than one block period after its due time counts as an xrun.

* edit-to-sound: from a value edit made through the workbench (the call a
  value field makes on Enter) to the start of the first audio block that
  runs with the new element values (the host stamps the hand-over; the block
  that follows it is the first to use them).
* frame rate: meter/trace redraws per second of the window's meter timer
  (target period 33 ms) while the host plays the flagship design.

Prints a table and writes bench/results/gui.json. Run:
``QT_QPA_PLATFORM=offscreen python bench/bench_gui.py [--seconds 8] [--design flagship]``
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import tempfile
import threading
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--design", default="flagship")
    ap.add_argument("--seconds", type=float, default=8.0)
    ap.add_argument("--block", type=int, default=128)
    ap.add_argument("--fs", type=float, default=48000.0)
    ap.add_argument("--edits", type=int, default=30)
    ap.add_argument("--switch-interval", type=float, default=None,
                    help="sys.setswitchinterval for the run (default: the workbench's own)")
    ap.add_argument("--no-meters", action="store_true",
                    help="baseline: play without the meter timer (no GUI redraws)")
    ap.add_argument("--out", default=str(Path(__file__).resolve().parent / "results" / "gui.json"))
    args = ap.parse_args(argv)

    import numpy as np
    from PyQt6.QtCore import QEventLoop, QTimer
    from engine.design import load_design
    from engine.live.host import LiveHost
    from engine.live.source import SynthLoop
    from engine.values import step_preferred
    from gui.app import make_window

    from gui.app import tune_interpreter
    tune_interpreter()                       # what `solderless gui` does
    if args.switch_interval:
        sys.setswitchinterval(args.switch_interval)
    cfg = Path(tempfile.mkdtemp(prefix="solderless-bench-"))
    design = load_design(args.design)
    win = make_window(design, config=cfg, recover="no", seconds=1.0)
    win.ask = lambda _q: "discard"
    win.show()
    win.wait_idle(300)

    host = LiveHost(win.wb.design.copy(), fs=args.fs, block=args.block,
                    source=SynthLoop("chords"), autosave=False)
    t_build = time.perf_counter()
    host.prepare()
    t_build = time.perf_counter() - t_build
    applied: list[float] = []
    orig_set = host.set_value

    def stamped_set(part, value, voice=None):
        applied.append(time.perf_counter())      # the host's own edit clock starts here
        return orig_set(part, value, voice)
    host.set_value = stamped_set

    period = args.block / args.fs
    stop = threading.Event()
    late = [0]
    blocks_done = [0]

    busy = [0.0]

    def driver():
        t_next = time.perf_counter()
        while not stop.is_set():
            tb = time.perf_counter()
            host.run_offline(1)
            busy[0] += time.perf_counter() - tb
            blocks_done[0] += 1
            t_next += period
            now = time.perf_counter()
            if now > t_next + period:
                late[0] += 1
                t_next = now          # resynchronise like a sound card after an xrun
            else:
                d = t_next - now
                if d > 0:
                    time.sleep(d)

    win.host = host
    win.live.clear_live()
    frames = []
    orig_poll = win._poll_meters

    def counted_poll():
        t0 = time.perf_counter()
        orig_poll()
        frames.append((t0, time.perf_counter() - t0))
    win.meter_timer.timeout.disconnect()
    win.meter_timer.timeout.connect(counted_poll)
    th = threading.Thread(target=driver, daemon=True)
    th.start()
    loop = QEventLoop()
    # baseline: the same driver with the window idle, to separate the machine's
    # own scheduling noise from what the meters and traces cost
    t_b = time.perf_counter()
    while time.perf_counter() - t_b < 3.0:
        loop.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 10)
        time.sleep(0.001)
    baseline_late, baseline_blocks = late[0], blocks_done[0]
    late[0] = 0
    blocks_done[0] = 0
    if not args.no_meters:
        win.meter_timer.start(33)

    # value edits from the GUI thread, spread over the run
    edits: list[tuple[float, int]] = []     # (t_edit, index into applied)
    parts = [p.qualname for p in win.wb.design.parts()
             if p.type in ("resistor", "capacitor") and p.value]
    target = "detector.RREL" if "detector.RREL" in parts else parts[0]
    n_edit = [0]

    def do_edit():
        if n_edit[0] >= args.edits:
            return
        v = win.wb.design.part(target).value
        nv = step_preferred(v, "E24", 1 if n_edit[0] % 2 == 0 else -1)
        k = len(applied)
        t0 = time.perf_counter()
        win.wb.set_value(target, nv)
        edits.append((t0, k))
        n_edit[0] += 1
    edit_timer = QTimer()
    edit_timer.timeout.connect(do_edit)
    edit_timer.start(int(1000 * args.seconds / (args.edits + 2)))

    t_start = time.perf_counter()
    while time.perf_counter() - t_start < args.seconds:
        loop.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 10)
        time.sleep(0.001)
    edit_timer.stop()
    # let the last edits land
    t_wait = time.perf_counter()
    while time.perf_counter() - t_wait < 1.0:
        loop.processEvents(QEventLoop.ProcessEventsFlag.AllEvents, 10)
        time.sleep(0.001)
    win.meter_timer.stop()
    stop.set()
    th.join(5)
    elapsed = time.perf_counter() - t_start

    # edit-to-sound: from the workbench edit to the start of the first block that
    # uses it = (GUI edit -> host call) + the host's own request-to-block time
    lat = host.edit_latencies_s
    e2s = []
    for (t0, k) in edits:
        if k < len(applied) and k < len(lat):
            e2s.append(applied[k] + lat[k] - t0)
    e2s = np.array(e2s) * 1e3
    print(f"edits made {len(edits)}, hand-overs {len(applied)}, blocks after hand-over {len(lat)}")
    ft = np.array([f[0] for f in frames])
    in_run = ft[(ft >= t_start) & (ft <= t_start + args.seconds)]
    fps = (len(in_run) - 1) / (in_run[-1] - in_run[0]) if len(in_run) > 1 else 0.0
    redraw_ms = np.array([f[1] for f in frames]) * 1e3
    host.close()
    win.host = None
    win.close()

    res = {
        "design": args.design, "fs": args.fs, "block": args.block,
        "seconds": args.seconds, "driver": "paced offline driver (no sound card)",
        "switch_interval_s": sys.getswitchinterval(),
        "host_prepare_s": round(t_build, 3),
        "edits": int(len(e2s)), "edited_part": target,
        "edit_to_sound_ms": {"median": float(np.median(e2s)) if len(e2s) else None,
                             "p95": float(np.percentile(e2s, 95)) if len(e2s) else None,
                             "max": float(e2s.max()) if len(e2s) else None},
        "gui_fps": round(float(fps), 1),
        "redraw_ms": {"median": float(np.median(redraw_ms)) if len(redraw_ms) else None,
                      "p95": float(np.percentile(redraw_ms, 95)) if len(redraw_ms) else None},
        "blocks": blocks_done[0], "late_blocks_xruns": late[0],
        "baseline_idle_window": {"seconds": 3.0, "blocks": baseline_blocks,
                                 "late_blocks": baseline_late},
        "realtime_blocks_expected": int(elapsed / period),
        "targets": {"edit_to_sound_ms": 30, "gui_fps": 30, "xruns": 0},
        "machine": {"python": platform.python_version(), "cpus": os.cpu_count(),
                    "platform": platform.platform()},
    }
    print(f"{'measure':<34}{'value':>14}   target")
    print(f"{'edit-to-sound median (ms)':<34}{res['edit_to_sound_ms']['median'] or float('nan'):>14.2f}   <= 30")
    print(f"{'edit-to-sound p95 (ms)':<34}{res['edit_to_sound_ms']['p95'] or float('nan'):>14.2f}   <= 30")
    print(f"{'edit-to-sound max (ms)':<34}{res['edit_to_sound_ms']['max'] or float('nan'):>14.2f}")
    print(f"{'GUI frames per second':<34}{res['gui_fps']:>14.1f}   >= 30")
    print(f"{'meter+trace redraw median (ms)':<34}{res['redraw_ms']['median'] or float('nan'):>14.2f}")
    print(f"{'late blocks (xruns)':<34}{late[0]:>14d}   0")
    print(f"{'late blocks, idle window, 3 s':<34}{baseline_late:>14d}   (machine baseline)")
    print(f"{'blocks run / real-time expected':<34}{blocks_done[0]:>7d} / {res['realtime_blocks_expected']}")
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(res, indent=2))
    print(f"driver time per block {1e3 * busy[0] / max(1, blocks_done[0]):.2f} ms")
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""``solderless play`` and ``solderless devices``.

``solderless.app.cli`` registers these with :func:`add_play_arguments` /
:func:`run_play` and :func:`add_devices_arguments` / :func:`run_devices`.
Nothing here imports sounddevice at module level, so the rest of the command
line works without the PortAudio library.
"""
from __future__ import annotations

import json
import math
import sys
import threading
import time

from solderless.engine.errors import AudioError, SolderlessError
from solderless.engine.live import meters as M


def parse_full_scale(text: str | None, what: str) -> float | None:
    """Read a calibration: ``+3dBu`` (RMS of the full-scale sine, dBu) or
    ``1.55V`` / ``1.55`` (peak volts at full scale). Returns peak volts."""
    if text is None:
        return None
    t = text.strip().replace(" ", "")
    try:
        if t.lower().endswith("dbu"):
            return M.dbu_to_vrms(float(t[:-3])) * math.sqrt(2.0)
        from solderless.engine.values import parse_value
        v = parse_value(t, unit="V")
    except (ValueError, SolderlessError):
        raise AudioError(f"cannot read the {what} calibration '{text}'",
                         hint="write it as peak volts (1.55V) or as the dBu of a "
                              "full-scale sine (+3dBu)") from None
    if not v > 0:
        raise AudioError(f"the {what} calibration must be positive, not '{text}'")
    return float(v)


def add_play_arguments(p) -> None:
    """Arguments of ``solderless play``."""
    p.add_argument("design", nargs="?", default="flagship",
                   help="design file (.toml), built-in design name, or SPICE netlist "
                        "(default: flagship)")
    p.add_argument("--vs", metavar="VARIANT",
                   help="a second design to compare live (A = DESIGN, B = VARIANT)")
    p.add_argument("--source", default="input", metavar="SRC",
                   help="input (the sound card, default), synth[:PHRASE] (built-in "
                        "instrument), tone[:HZ[:VOLTS_PEAK]], or an audio file to loop")
    p.add_argument("--input-device", metavar="DEV", help="input device (index or name part)")
    p.add_argument("--output-device", metavar="DEV", help="output device (index or name part)")
    # option values are checked at parse time (solderless/app/cli.py types)
    from solderless.app.cli import (add_channel_option, add_rate_option, live_check,
                            seconds_arg, whole_in)
    add_channel_option(p, "input channel the instrument is on (1-based, default 1)")
    add_rate_option(p, 48000.0, "sample rate, Hz (default 48000)", live=True)
    p.add_argument("--block", type=whole_in(16, 8192, "block size"), default=128,
                   help="block size in samples (default 128; 64 for the lowest latency)")
    p.add_argument("--oversample", type=int, choices=(1, 2, 4, 8),
                   help="oversampling factor (default: the design's suggestion)")
    from solderless.engine.levels import describe
    p.add_argument("--in-full-scale", metavar="LEVEL",
                   help="input calibration: peak volts at the jack for digital full scale "
                        f"(1.55V) or dBu of a full-scale sine (+3dBu); default: {describe()}, "
                        "as in every command")
    p.add_argument("--out-full-scale", metavar="LEVEL",
                   help="output calibration, same form (default: the same)")
    p.add_argument("--level", type=live_check("check_level_db"), default=0.0, metavar="DB",
                   help="output level, dB (default 0); playback starts silent and ramps up")
    p.add_argument("--ceiling", type=live_check("check_ceiling_dbfs"), default=-6.0,
                   metavar="DBFS",
                   help="safety limiter ceiling, dBFS (default -6)")
    p.add_argument("--no-match", action="store_true",
                   help="A/B: do not match loudness (BS.1770-4)")
    p.add_argument("--seconds", type=seconds_arg, metavar="N",
                   help="stop after N seconds and print a meter summary")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.add_argument("--no-console", action="store_true",
                   help="do not read commands from the terminal")
    from solderless.app.hiss_options import add_hiss_options
    add_hiss_options(p)


def add_devices_arguments(p) -> None:
    """Arguments of ``solderless devices``."""
    p.add_argument("--json", action="store_true", help="print as JSON")


def run_devices(args) -> int:
    """List the devices PortAudio sees."""
    from solderless.engine.live.stream import list_devices
    devs = list_devices()
    if getattr(args, "json", False):
        print(json.dumps(devs, indent=1))
        return 0
    if devs:
        print("marks: '<' the default input device, '>' the default output device; "
              "use the index or part of the name with --input-device / --output-device")
    for d in devs:
        mark = ("<" if d["default_input"] else " ") + (">" if d["default_output"] else " ")
        print(f"{mark} {d['index']:3d}  {d['name']}  ({d['host_api']}, "
              f"{d['inputs']} in, {d['outputs']} out, {d['default_samplerate']:.0f} Hz)")
    if not devs:
        print("PortAudio sees no audio devices")
    return 0


def _summary(host, m: dict, wall: float) -> dict:
    lat = m["latency"]
    return {
        "designs": [getattr(v.design, "name", "?") for v in host.voices],
        "source": host.source.label,
        "sample_rate": host.fs, "block": host.block, "oversample": host.oversample,
        "seconds_wall": wall, "blocks": m["blocks"],
        "seconds_audio": m["blocks"] * host.block / host.fs,
        "input_full_scale_v_peak": host.in_fs_v,
        "output_full_scale_v_peak": host.out_fs_v,
        "output_level_db": host.level_db, "ceiling_dbfs": host.ceiling_dbfs,
        "session": m.get("session", {}),
        "meters": m, "latency": lat, "xruns": m["xruns"], "guard": m["guard"],
        "error": None if host.error is None else repr(host.error),
        "autosave": host.autosave_paths(),
    }


def _print_summary(s: dict, say) -> None:
    m = s["meters"]
    say(f"played {s['seconds_audio']:.1f} s of audio ({s['blocks']} blocks of {s['block']} "
        f"at {s['sample_rate']:.0f} Hz, x{s['oversample']} oversampling) from {s['source']}")
    say(f"calibration: full scale = {s['input_full_scale_v_peak']:.3g} V peak in, "
        f"{s['output_full_scale_v_peak']:.3g} V peak out "
        f"({M.vrms_to_dbu(s['input_full_scale_v_peak'] / math.sqrt(2)):+.1f} dBu sine)")
    ss = s.get("session") or {}
    if ss:
        say(f"session: input peak max {ss['input_peak_v']:.4g} V "
            f"({ss['input_peak_dbfs']:.1f} dBFS); output peak max "
            f"{ss['output_peak_v']:.4g} V at the jack ({ss['output_peak_dbfs']:.1f} dBFS)")
        for k, v in ss.get("voices", {}).items():
            bits = [f"  {k}:"]
            if v["control_a_min"] is not None:
                bits.append(f"control {1e6 * v['control_a_min']:.2f} .. "
                            f"{1e6 * v['control_a_max']:.2f} uA")
            if v["gr_control_db_deepest"] is not None:
                bits.append(f"deepest gain reduction {v['gr_control_db_deepest']:.1f} dB "
                            "(control)")
            if len(bits) > 1:
                say("  ".join(bits))
        c = ss["cpu_load"]
        if c["blocks"]:
            say(f"  CPU per block (of the block period): median {100 * c['median']:.0f}%, "
                f"p99 {100 * c['p99']:.0f}%, max {100 * c['max']:.0f}%; "
                f"xruns {ss['xruns']}")
        say("at the end (ballistic meters: peak hold "
            f"{m['peak_hold_s']:g} s then {m['peak_fall_db_per_s']:g} dB/s, "
            f"RMS over {1e3 * m['rms_window_s']:.0f} ms):")
    inp, out = m["input"], m["output"]
    say(f"input : peak {inp['peak_v']:.4g} V ({inp['peak_dbfs']:.1f} dBFS), "
        f"RMS {inp['rms_v']:.4g} V ({inp['rms_dbfs']:.1f} dBFS)")
    say(f"output: peak {out['peak_v']:.4g} V at the jack, {out['peak_dbfs']:.1f} dBFS; "
        f"RMS {out['rms_v']:.4g} V, {out['rms_dbfs']:.1f} dBFS; "
        f"deepest limiting {out['limiter_gr_db_max']:.1f} dB")
    for k, v in m["voices"].items():
        bits = [f"{k}:"]
        if v["control_ua"] is not None:
            bits.append(f"control {v['control_ua']:.2f} uA")
        if v["gr_control_db"] is not None:
            bits.append(f"gain reduction {v['gr_control_db']:.1f} dB (control)")
        if v["gr_measured_db"] is not None:
            bits.append(f"{v['gr_measured_db']:.1f} dB (measured)")
        if v["loudness_lkfs"] is not None:
            bits.append(f"loudness {v['loudness_lkfs']:.1f} LUFS")
        say("  ".join(bits))
    if any(v["gr_control_db"] is not None or v["gr_measured_db"] is not None
           for v in m["voices"].values()):
        say("  (gain reduction from the control: the control against its resting value; "
            "measured: output/input level against the resting small-signal gain; "
            "both 0 dB at rest)")
    if len(m["voices"]) > 1:
        say(f"loudness match: A - B = {m['loudness_offset_db']:+.2f} LU applied")
    lat = s["latency"]
    say(f"latency {1e3 * lat['total_s']:.1f} ms (stream {1e3 * (lat['stream_in_s'] + lat['stream_out_s']):.1f} ms, "
        f"oversampling {1e3 * lat['oversampling_s']:.2f} ms); CPU per block "
        f"mean {100 * m['cpu_load_mean']:.0f}%, max {100 * m['cpu_load_max']:.0f}%; xruns {s['xruns']}")
    if s["xruns"]:
        say("the computer could not keep up: try a larger --block (256) or lower --oversample")
    if s["guard"]:
        say(f"output was muted for safety: {s['guard']}")
    if s.get("hiss"):
        from solderless.app.hiss_options import floor_line
        say(floor_line(s["hiss"]))


def run_play(args) -> int:
    """Play a design (and optionally a variant) live; see ``--help``."""
    from solderless.engine.design import load_design
    from solderless.engine.live.host import LiveHost
    from solderless.engine.settings import caution_once
    from solderless.engine.live.source import parse_source
    from solderless.engine.live.stream import load_sounddevice

    err = lambda s: print(s, file=sys.stderr)  # noqa: E731
    load_sounddevice()          # fail early, with the install line, before any work
    design = load_design(args.design)
    variant = load_design(args.vs) if args.vs else None
    if args.input_channel < 1:
        raise AudioError(f"input channel {args.input_channel} does not exist",
                         hint="channels count from 1")
    source = parse_source(args.source, args.input_channel - 1)
    from solderless.app.hiss_options import hiss_choice
    hiss_on, hiss_seed = hiss_choice(args, design)
    for d in (design, variant):
        # both sides play their own noise (solver/livenoise.py); the
        # console's 'hiss' switches it while playing.  Set in the model only:
        # a command-line choice is not written into the design file
        if d is not None:
            d.hiss, d.hiss_seed = hiss_on, hiss_seed
    host = LiveHost(design, variant=variant, fs=args.rate, block=args.block,
                    oversample=args.oversample, source=source,
                    in_full_scale_v=parse_full_scale(args.in_full_scale, "input"),
                    out_full_scale_v=parse_full_scale(args.out_full_scale, "output"),
                    level_db=args.level, ceiling_dbfs=args.ceiling,
                    loudness_match=not args.no_match)
    caution_once(err)
    names = [str(getattr(v.design, "name", "?")) for v in host.voices]
    if len(names) == 2 and names[0] == names[1]:
        # two files with one name: tell the sides apart by their files
        from pathlib import Path
        names = [f"{n} ({Path(getattr(v.design, 'path', '') or v.label).name})"
                 for n, v in zip(names, host.voices)]
    err(f"building {', '.join(names)} ...")
    host.prepare()
    err(f"input calibration: full scale {host.in_fs_v:.3g} V peak "
        f"({M.vrms_to_dbu(host.in_fs_v / math.sqrt(2)):+.1f} dBu sine); source: {source.label}")
    t0 = time.perf_counter()
    try:
        host.start(input_device=args.input_device, output_device=args.output_device)
    except SolderlessError:
        host.close()
        raise
    stop = threading.Event()
    console_thread = None
    interactive = not args.no_console and sys.stdin is not None
    if interactive:
        from solderless.app.console import Console
        con = Console(host, say=err)
        tty = sys.stdin.isatty()
        if tty:
            err("type 'help' for commands, 'quit' to stop")

        def read():
            try:
                for line in sys.stdin:
                    if not con.handle(line):
                        stop.set()
                        return
            except (OSError, ValueError):
                return
            if tty:                 # Ctrl-D at the terminal stops; a script's end does not
                stop.set()
        console_thread = threading.Thread(target=read, daemon=True)
        console_thread.start()
    problem = None
    told_guard = ""
    told_xruns = 0
    try:
        while not stop.is_set():
            if args.seconds is not None and time.perf_counter() - t0 >= args.seconds:
                break
            stop.wait(0.1)
            host.meters()           # drain the ring so the session figures see every block
            while not host.messages.empty():
                err(host.messages.get())
            if host.error is not None:
                problem = f"the audio stream failed: {host.error!r}"
                break
            if host.stream is not None and not host.stream.active:
                problem = "the audio stream stopped (device unplugged or closed?)"
                break
            g = host.guard_reason
            if g and g != told_guard:
                err(f"output muted for safety: {g}; type 'unmute' to resume")
            told_guard = g
            if host.xruns > told_xruns and told_xruns == 0:
                err("audio dropouts (xruns): the computer is not keeping up; "
                    "try a larger --block (256) or a lower --oversample")
            told_xruns = host.xruns
    except KeyboardInterrupt:
        pass
    finally:
        wall = time.perf_counter() - t0
        host.stop()
        m = host.meters()
        s = _summary(host, m, wall)
        from solderless.engine.live.host import hiss_of
        on_end, seed_end = hiss_of(host.voices[0].design)
        if on_end:      # the noise plays at the end of the session
            from solderless.app.hiss_options import floor_summary
            s["hiss"] = floor_summary(host.voices[0].design.flatten(), seed_end)
        host.close()
    written = host.autosaved_paths()        # the files autosave really wrote
    if problem:
        err(f"stopped: {problem}. Your design and its edits are kept"
            + (f" (autosave: {', '.join(written)})" if host.edits and written else ""))
    elif host.edits and written:
        err(f"{host.edits} edit(s) this session; a copy is in {', '.join(written)}"
            " ('save' writes the design itself)")
    if args.seconds is not None or args.json:
        if args.json:
            print(json.dumps(s, indent=1, default=str))
        else:
            _print_summary(s, print)
    return 1 if problem else 0

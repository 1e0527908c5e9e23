"""The ``solderless`` command.

Subcommands: ``render``, ``op``, ``ac``, ``play``, ``devices``, ``source``,
``demo``, ``gui``, ``designs``. User mistakes (``SolderlessError``) print one
clear line and exit with status 2; they never print a traceback.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time
from pathlib import Path

from solderless.engine.errors import DesignError, SolderlessError
from solderless.engine.levels import FULL_SCALE_V, describe as describe_levels

DEFAULT_DESIGN = "flagship"


# ------------------------------------------------------------------ options
# Every number an option takes is checked here, at parse time, so a bad
# value is one line naming the option (never a traceback or a huge
# allocation further on).  Limits: solderless/engine/limits.py.

class OptionParser(argparse.ArgumentParser):
    """argparse with a one-line error (``error: argument --x: ...``, exit 2)
    instead of the usage block; subcommands inherit it."""

    def error(self, message):  # noqa: D401 - argparse API
        from solderless.engine.errors import cut_long
        self.exit(2, f"error: {self.prog}: {cut_long(message)} "
                     f"(see '{self.prog} --help')\n")


def _number(text: str) -> float:
    from solderless.engine.values import parse_value
    try:
        x = float(text)
    except ValueError:
        try:
            x = float(parse_value(text))
        except Exception:
            raise argparse.ArgumentTypeError(f"'{text}' is not a number") from None
    if not math.isfinite(x):
        raise argparse.ArgumentTypeError(f"'{text}' is not a finite number")
    return x


def finite_number(text: str) -> float:
    """An argparse type: any finite number (the range is checked where the
    value is used, e.g. solderless/engine/live/limits.py for level and ceiling)."""
    return _number(text)


def number_in(lo: float | None, hi: float | None, unit: str = "", *,
              open_low: bool = False):
    """An argparse type: a finite number (SI prefixes allowed: 44.1k) from
    ``lo`` to ``hi`` (``open_low``: strictly above ``lo``)."""
    def parse(text: str) -> float:
        x = _number(text)
        low_bad = lo is not None and (x <= lo if open_low else x < lo)
        if low_bad or (hi is not None and x > hi):
            lo_s = "" if lo is None else (f"above {lo:g}" if open_low else f"from {lo:g}")
            hi_s = "" if hi is None else f"{' ' if lo_s else ''}{'to' if lo_s else 'at most'} {hi:g}"
            raise argparse.ArgumentTypeError(
                f"{x:g}{' ' + unit if unit else ''} is out of range (give a value "
                f"{lo_s}{hi_s}{' ' + unit if unit else ''})")
        return x
    return parse


def whole_in(lo: int, hi: int, what: str = "value"):
    """An argparse type: a whole number from ``lo`` to ``hi``."""
    def parse(text: str) -> int:
        try:
            x = int(text, 10)
        except ValueError:
            raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
        if not lo <= x <= hi:
            raise argparse.ArgumentTypeError(f"{what} {x} is out of range (give {lo} to {hi})")
        return x
    return parse


def sample_rate(text: str) -> float:
    """An argparse type: a simulation sample rate.  The live path's own
    check (solderless/engine/live/limits.py, the audio interface's range) is used when
    present; otherwise the offline range of solderless/engine/limits.py."""
    from solderless.engine import limits
    return number_in(limits.MIN_RATE, limits.MAX_RATE, "Hz")(text)


def live_check(name: str, fallback=None):
    """An argparse type that applies the live path's own check
    ``solderless.engine.live.limits.<name>`` (level, ceiling, rate: the ranges that keep
    the sound card safe live there, in one place); where that module is
    absent, ``fallback`` (default: any finite number)."""
    def parse(text: str):
        x = _number(text)
        try:
            import solderless.engine.live.limits as live_limits
            check = getattr(live_limits, name)
        except (ImportError, AttributeError):
            return (fallback or finite_number)(text)
        try:
            return check(x)
        except SolderlessError as exc:
            raise argparse.ArgumentTypeError(
                exc.message + (f" ({exc.hint})" if exc.hint else "")) from None
    return parse


def live_rate(text: str) -> float:
    """An argparse type for ``play --rate``: the live path's check."""
    return live_check("check_rate", sample_rate)(text)


def input_channel(text: str) -> int:
    """An argparse type: an input channel, counted from 1."""
    return whole_in(1, 1024, "channel")(text)


def seconds_arg(text: str) -> float:
    """An argparse type: a length of time in seconds."""
    from solderless.engine import limits
    return number_in(0.0, limits.MAX_SECONDS, "s", open_low=True)(text)


def add_rate_option(p, default=None, help_text="sample rate in Hz", live=False):
    """``--rate`` (the one name) and the old ``--fs`` as a hidden alias."""
    kind = live_rate if live else sample_rate
    p.add_argument("--rate", type=kind, default=default, metavar="HZ", help=help_text)
    p.add_argument("--fs", type=kind, dest="rate_old_name", default=None,
                   help=argparse.SUPPRESS)


def add_channel_option(p, help_text="input channel to use, counted from 1 (default 1)"):
    """``--input-channel`` (1-based) and the old ``--channel`` as a hidden
    alias, now 1-based as well."""
    p.add_argument("--input-channel", type=input_channel, default=1, metavar="N",
                   help=help_text)
    p.add_argument("--channel", type=input_channel, dest="channel_old_name", default=None,
                   help=argparse.SUPPRESS)


def resolve_aliases(args) -> None:
    """Move the old option names' values onto the new ones, with a note."""
    if getattr(args, "rate_old_name", None) is not None:
        print("note: --fs is now called --rate (the old name still works for now)",
              file=sys.stderr)
        args.rate, args.rate_old_name = args.rate_old_name, None
    if getattr(args, "channel_old_name", None) is not None:
        print("note: --channel is now called --input-channel and counts from 1 like it",
              file=sys.stderr)
        args.input_channel, args.channel_old_name = args.channel_old_name, None


# ------------------------------------------------------------------ helpers

def warn(text: str) -> None:
    """A warning line on stderr (long echoes cut)."""
    from solderless.engine.errors import cut_long
    print(f"warning: {cut_long(text)}", file=sys.stderr)


def _load(args):
    from solderless.engine.design import load_design
    d = load_design(args.design, in_source=getattr(args, "in_source", "VIN"),
                    out_node=getattr(args, "out_node", "out"))
    nl = getattr(d, "netlist", None)
    for w in (nl.warnings if nl is not None else []):
        warn(w)
    if d.netlist is None and d.stages:
        for w in d.dangling_probes():
            warn(w)
    return d


def _flatten(d):
    """The design's flat circuit, with the circuit check's warnings (a net
    with one connection) and values outside real parts' range shown."""
    from solderless.engine.sanity import check_values
    circ = d.flatten()
    for w in getattr(d, "check_warnings", []) or []:
        warn(w)
    for w in check_values(circ):
        warn(w)
    return circ


def _audio_formats() -> dict[str, tuple[str, str | None]]:
    """Output file extension -> (soundfile format, subtype)."""
    return {".wav": ("WAV", "FLOAT"), ".flac": ("FLAC", "PCM_24"),
            ".aif": ("AIFF", "FLOAT"), ".aiff": ("AIFF", "FLOAT"),
            ".ogg": ("OGG", "VORBIS")}


def _write_csv(path, header: str, columns, inputs=()) -> None:
    """A CSV file written atomically (solderless.engine.fileio)."""
    import io
    import numpy as np
    from solderless.engine.fileio import atomic_write
    buf = io.StringIO()
    np.savetxt(buf, columns, delimiter=",", header=header, comments="", fmt="%.9g")
    atomic_write(path, buf.getvalue(), inputs=inputs)


def _add_design_arg(p, nargs=None):
    p.add_argument("design", nargs=nargs, default=DEFAULT_DESIGN if nargs else None,
                   help="design file (.toml), built-in design name, or SPICE netlist "
                        f"(default: {DEFAULT_DESIGN})" if nargs else
                        "design file (.toml), built-in design name, or SPICE netlist")
    p.add_argument("--in-source", default="VIN", metavar="NAME",
                   help="netlists only: the voltage source the input drives (default VIN)")
    p.add_argument("--out-node", default="out", metavar="NAME",
                   help="netlists only: the output node (default out)")


class Progress:
    """A one-line progress bar on stderr, shown only for long jobs on a terminal."""

    def __init__(self, total: int, label: str, min_seconds: float = 1.0):
        self.total = max(total, 1)
        self.label = label
        self.t0 = time.perf_counter()
        self.shown = False
        self.min_seconds = min_seconds
        self.tty = sys.stderr.isatty()

    def update(self, done: int) -> None:
        el = time.perf_counter() - self.t0
        if not self.tty or el < self.min_seconds:
            return
        frac = min(done / self.total, 1.0)
        bar = "#" * int(30 * frac)
        eta = el / frac - el if frac > 0 else 0.0
        sys.stderr.write(f"\r{self.label} [{bar:<30}] {100 * frac:5.1f}%  {eta:5.1f}s left ")
        sys.stderr.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            sys.stderr.write("\n")


def _fmt(x, unit: str) -> str:
    from solderless.engine.values import format_reading
    return format_reading(x, unit)


# ------------------------------------------------------------------ render

def read_audio(path, channel: int = 1):
    """One channel (counted from 1) of an audio file, as float64 samples in
    full-scale units, and its sample rate.  Refuses devices and pipes, files
    over the size limit, empty files and non-finite samples, naming the file."""
    import numpy as np
    import soundfile as sf
    from solderless.engine import limits
    from solderless.engine.fileio import check_input_file
    path = str(path)
    check_input_file(path, what="audio file", limit=limits.MAX_AUDIO_BYTES)
    try:
        x, fs_in = sf.read(path, dtype="float64", always_2d=True)
    except MemoryError:
        raise DesignError("the audio file is too large to read into memory",
                          file=path) from None
    except Exception as exc:
        raise DesignError(f"cannot read audio: {str(exc).splitlines()[0] if str(exc) else exc}",
                          file=path, hint="use a WAV (or FLAC/OGG) file") from None
    if x.shape[0] == 0:
        raise DesignError("the audio file holds no samples", file=path)
    if not limits.MIN_RATE / 8 <= fs_in <= limits.MAX_RATE:
        raise DesignError(f"the audio file's sample rate {fs_in} Hz is out of range",
                          file=path)
    if channel > x.shape[1]:
        raise DesignError(f"the file has {x.shape[1]} channel(s); --input-channel {channel} "
                          "does not exist", file=path,
                          hint=f"use --input-channel 1 to {x.shape[1]}")
    x = x[:, channel - 1]
    bad = ~np.isfinite(x)
    if bad.any():
        k = int(np.argmax(bad))
        raise DesignError(f"sample {k} (at {k / fs_in:.3f} s) is not a finite number "
                          f"({int(bad.sum())} such samples)", file=path,
                          hint="the file is damaged; export it again")
    return x, int(fs_in)


def cmd_render(args) -> int:
    import numpy as np
    import soundfile as sf
    from solderless.engine import limits
    from solderless.engine.fileio import atomic_write, write_target
    fmt = _audio_formats().get(Path(args.output).suffix.lower())
    if fmt is None:
        raise DesignError("unknown output file type", file=args.output,
                          hint="end the name with " + ", ".join(_audio_formats()))
    # refuse bad output paths and an output that is the input before the
    # (possibly long) simulation, not after it
    for target in (args.output, args.probes_csv):
        if target:
            real = write_target(target)
            if real.exists() and os.path.exists(args.input) and \
                    os.path.samefile(args.input, real):
                raise DesignError("is also the input; writing it would destroy the input",
                                  file=target, hint="write to another file name")
    d = _load(args)
    inp = Path(args.input)
    x, fs_in = read_audio(inp, args.input_channel)
    fs = float(args.rate or fs_in)
    n_out = int(len(x) * fs / fs_in)
    if n_out > limits.MAX_RENDER_SAMPLES:
        raise DesignError(f"rendering {n_out} samples ({n_out / fs:.0f} s at {fs:g} Hz) is "
                          f"over the limit of {limits.MAX_RENDER_SAMPLES}", file=str(inp),
                          hint="render a shorter excerpt or at a lower --rate")
    if int(fs) != int(fs_in):
        from fractions import Fraction
        from scipy.signal import resample_poly
        fr = Fraction(int(fs), int(fs_in)).limit_denominator(1000)
        x = resample_poly(x, fr.numerator, fr.denominator)
    volts = x * args.input_fs_volts
    oversample = args.oversample or d.oversample
    names = list(args.probe)
    if args.probes_csv and not names:
        # the design's own probes (its [[probe]] tables and its control)
        names = [p.expr for p in d.probes]
        ctl = d.control_probe()
        if ctl and ctl not in names:
            names.insert(0, ctl)
        if not names:
            raise DesignError("--probes-csv: the design declares no probes",
                              file=d._file(), hint="add --probe NAME, e.g. --probe 'v(out)'")
        dangling = {e for e, _ in d.dangling_probe_list()}
        names = [n for n in names if n not in dangling]
    probes = [d.resolve_probe(p) for p in names]
    circ = _flatten(d)
    from solderless.app.hiss_options import hiss_choice
    hiss_on, hiss_seed = hiss_choice(args, d)
    if hiss_on:   # the circuit's noise inside the simulation (solver/livenoise.py)
        from solderless.engine.solver.livenoise import HissSimulator
        sim = HissSimulator(circ, fs=fs, oversample=oversample, probes=tuple(probes),
                            seed=hiss_seed)
    else:
        from solderless.engine.solver import Simulator
        sim = Simulator(circ, fs=fs, oversample=oversample, probes=tuple(probes))
    for w in sim.warnings:
        print(f"warning: {w}", file=sys.stderr)
    n = len(volts)
    y = np.empty(n)
    pdata = np.empty((len(probes), n)) if probes else None
    block = 4096
    prog = Progress(n, f"render {Path(args.output).name}")
    for s in range(0, n, block):
        e = min(s + block, n)
        # probes are recorded every sample here, straight into their columns
        sim.process_into(volts[s:e], y[s:e], pdata, probe_start=s)
        prog.update(e)
    prog.close()
    # fixed oversampling latency: shift so output lines up with the input
    lat = int(round(sim.latency_samples))
    if lat > 0 and not args.keep_latency:
        y = np.concatenate([y[lat:], np.full(lat, y[-1])])
    yo = y / args.output_fs_volts
    peak = float(np.max(np.abs(yo))) if n else 0.0
    if peak > 1.0:
        print(f"warning: output peaks at {20 * math.log10(peak):+.1f} dBFS and is clipped; "
              "raise --output-fs-volts", file=sys.stderr)
    if not np.all(np.isfinite(yo)):
        raise DesignError("the simulation produced non-finite output; nothing was written",
                          file=args.output, hint="check the warnings above; try "
                          "--oversample 2 or more")
    data = np.clip(yo, -1.0, 1.0).astype(np.float32)
    atomic_write(args.output, lambda tmp: sf.write(tmp, data, int(fs), format=fmt[0],
                                                   subtype=fmt[1]),
                 inputs=[inp], suffix=Path(args.output).suffix)
    st = sim.stats
    print(f"wrote {args.output}: {n / fs:.2f} s at {fs:g} Hz, oversample x{oversample}, "
          f"output peak {20 * math.log10(max(peak, 1e-12)):+.1f} dBFS "
          f"({peak * args.output_fs_volts:.3g} V)")
    print(f"calibration: input {describe_levels(args.input_fs_volts)}; output "
          f"{describe_levels(args.output_fs_volts)}")
    if hiss_on:
        from solderless.app.hiss_options import floor_line, floor_summary
        print(floor_line(floor_summary(circ, hiss_seed)))
    if st.get("nonconverged", 0):
        print(f"warning: {st['nonconverged']} samples did not converge (held at the last "
              "good solution); try --oversample 2 or more", file=sys.stderr)
    if probes:
        if not args.probes_csv:
            print("note: --probe given without --probes-csv; probe data not written",
                  file=sys.stderr)
        else:
            pdata = align_probes(pdata, sim.probe_latency_samples,
                                 0.0 if not args.keep_latency else float(lat))
            t = np.arange(n) / fs
            header = "time_s," + ",".join(_csv_field(n) for n in names)
            _write_csv(args.probes_csv, header, np.column_stack([t, pdata.T]),
                       inputs=[inp])
            print(f"wrote {args.probes_csv}: {len(probes)} probe(s)")
    return 0


def _csv_field(text: str) -> str:
    """A CSV header field (RFC 4180: quoted when it holds a comma or quote)."""
    return '"' + text.replace('"', '""') + '"' if any(c in text for c in ',"') else text


def align_probes(pdata, probe_delay: float, audio_delay: float):
    """Shift probe rows (n_probes, n) so row k describes the circuit at the
    instant audio sample k left it: probes are taken inside the oversampled
    kernel, behind the upsampler only (``probe_delay`` samples), while the
    written audio is ``audio_delay`` samples late (0 once the round-trip
    latency is removed).  Rows shifted past the end repeat the last value."""
    import numpy as np
    d = int(round(probe_delay - audio_delay))
    if d == 0 or pdata.shape[1] == 0:
        return pdata
    if d > 0:
        d = min(d, pdata.shape[1])
        return np.concatenate([pdata[:, d:], np.repeat(pdata[:, -1:], d, axis=1)], axis=1)
    d = min(-d, pdata.shape[1])
    return np.concatenate([np.repeat(pdata[:, :1], d, axis=1), pdata[:, :-d]], axis=1)


# ------------------------------------------------------------------ op / ac

def cmd_op(args) -> int:
    d = _load(args)
    circ = _flatten(d)
    from solderless.engine.solver import Simulator
    sim = Simulator(circ, fs=48000.0, oversample=1)
    op = sim.operating_point()
    data = op.to_dict()
    if args.json:
        print(json.dumps(data, indent=2, default=float))
        return 0
    print(f"Operating point of {d.name}")
    print("\nNets")
    for net, v in sorted(op.nets.items()):
        print(f"  {net:<28} {v:>10.4f} V")
    print("\nDevices")
    from solderless.engine.devices.registry import QUANTITY_UNITS
    for name, q in op.devices.items():
        items = []
        for k, v in q.items():
            if isinstance(v, (int, float)):
                unit = QUANTITY_UNITS.get(k, "")    # as the device declares it
                items.append(f"{k}={_fmt(v, unit)}")
            else:
                items.append(f"{k}={v}")
        print(f"  {name:<20} " + "  ".join(items))
    if op.devices:
        from solderless.engine.analysis import regions as R
        print(f"  (regions: a BJT is active, near saturation below Vce "
              f"{R.VCE_SAT + R.MARGIN:g} V, saturated below {R.VCE_SAT:g} V, cut-off under "
              f"Ic {R.IC_OFF * 1e6:g} uA; a FET amplifies when saturated; a diode is "
              f"forward from {R.DIODE_ON * 1e6:g} uA; ratings from the parts library)")
    if op.warnings:
        print("\nWarnings")
        for w in op.warnings:
            print(f"  ! {w}")
    return 0


def cmd_ac(args) -> int:
    import numpy as np
    if args.fmax <= args.fmin:
        raise DesignError(f"--fmax ({args.fmax:g} Hz) must be above --fmin "
                          f"({args.fmin:g} Hz)")
    if args.csv:
        from solderless.engine.fileio import write_target
        write_target(args.csv)
    d = _load(args)
    circ = _flatten(d)
    from solderless.engine.solver import ac_response
    f = np.geomspace(args.fmin, args.fmax, args.points)
    f, H, Z = ac_response(circ, f)
    mag = 20 * np.log10(np.maximum(np.abs(H), 1e-30))
    ph = np.degrees(np.angle(H))
    if args.csv:
        _write_csv(args.csv, "freq_hz,gain_db,phase_deg,zin_ohm,zin_phase_deg",
                   np.column_stack([f, mag, ph, np.abs(Z), np.degrees(np.angle(Z))]),
                   inputs=[args.design])
        print(f"wrote {args.csv}: {len(f)} points")
        return 0
    print(f"Small-signal response of {d.name} (input jack to output; gain in dB, phase in "
          "degrees, Zin: input impedance at the jack, ohm)")
    print(f"{'freq':>10} {'gain dB':>9} {'phase':>8} {'Zin':>12}")
    step = max(1, len(f) // 25)
    for i in range(0, len(f), step):
        print(f"{_fmt(f[i], 'Hz'):>10} {mag[i]:>9.2f} {ph[i]:>8.1f} {_fmt(abs(Z[i]), 'Ω'):>12}")
    return 0


def _sentences(text: str) -> list[str]:
    import re
    flat = " ".join(text.split())
    return [t for t in re.split(r"(?<=[.!?])\s+(?=[A-Z0-9(])", flat) if t]


def _leading_comment(path) -> str:
    try:
        first = Path(path).read_text(encoding="utf-8").splitlines()[0]
    except (OSError, IndexError, UnicodeDecodeError):
        return ""
    return first.lstrip("#").strip() if first.startswith("#") else ""


def cmd_designs(args) -> int:
    import shutil
    import textwrap
    from solderless.engine.design import builtin_designs, stage_library, load_design
    files = builtin_designs()
    width = max(60, min(shutil.get_terminal_size((100, 24)).columns, 120))
    print("Built-in designs:")
    loaded = {}
    for name in files:
        try:
            loaded[name] = load_design(name)
        except SolderlessError as exc:
            loaded[name] = exc
    for name in files:
        d = loaded[name]
        if isinstance(d, SolderlessError):
            print(f"  {name:<24} (cannot load: {d})")
            continue
        sents = _sentences(d.notes)
        # a variant (NAME-something of a design NAME) says what it changes,
        # not the base's description again
        base = max((k for k in files if name.startswith(k + "-")), key=len, default=None)
        if base is not None and not isinstance(loaded.get(base), SolderlessError):
            seen = set(_sentences(loaded[base].notes))
            own = [t for t in sents if t not in seen]
            what = own[0] if own else (_leading_comment(files[name]) or "same notes as the base")
            blurb = f"{d.name}: variant of {base}. {what}"
        else:
            blurb = f"{d.name}: {sents[0] if sents else ''}"
        text = textwrap.fill(blurb, width=width - 2, initial_indent=f"  {name:<24} ",
                             subsequent_indent=" " * 27)
        print(text)
    print("\nStage library:")
    for name in stage_library():
        print(f"  {name}")
    return 0


# ------------------------------------------------------------------ parser

def _command_of(argv) -> str:
    """The subcommand an argument list asks for: its first word that is not
    an option ("" for none, e.g. ``--help``)."""
    return next((a for a in argv if not a.startswith("-")), "")


def build_parser(argv=None) -> argparse.ArgumentParser:
    """The full parser; given ``argv``, only the subcommand it names gets its
    options (and imports its module), the others only their one-line help:
    start-up of one command does not pay for importing every other one
    (bench/bench_startup.py)."""
    command = None if argv is None else _command_of(argv)

    def wanted(name: str) -> bool:
        return command is None or command == name

    ap = OptionParser(
        prog="solderless",
        description="Hear an analog circuit before you build it: simulate a chain of "
                    "stages live or offline.",
        epilog=f"Level calibration (every command): {describe_levels()}, in and out.")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("render", help="run a WAV file through a design")
    _add_design_arg(p)
    p.add_argument("input", help="input audio file (WAV)")
    p.add_argument("output", help="output WAV file (32-bit float)")
    add_rate_option(p, help_text="simulation sample rate in Hz (default: the input file's; "
                    "the input is resampled if different)")
    p.add_argument("--oversample", type=int, choices=(1, 2, 4, 8), default=None,
                   help="oversampling factor (default: the design's)")
    p.add_argument("--input-fs-volts", type=number_in(0, 1e4, "V", open_low=True),
                   default=FULL_SCALE_V, metavar="V",
                   help="peak volts at the input jack that a full-scale sample stands "
                        f"for (default {FULL_SCALE_V:.4g}: the calibration every command "
                        "uses, solderless/engine/levels.py)")
    p.add_argument("--output-fs-volts", type=number_in(0, 1e4, "V", open_low=True),
                   default=FULL_SCALE_V, metavar="V",
                   help="peak volts at the output jack written as full scale "
                        f"(default {FULL_SCALE_V:.4g}, the same calibration)")
    add_channel_option(p)
    p.add_argument("--probe", action="append", default=[], metavar="NAME",
                   help="record a probe, e.g. 'iabc(gain.U1)' or 'v(buffer.out)' (repeatable)")
    p.add_argument("--probes-csv", metavar="FILE", help="write probes as CSV "
                   "(time in seconds, then each probe in SI units); without --probe, "
                   "the design's own probes ([[probe]] and [meters] control)")
    p.add_argument("--keep-latency", action="store_true",
                   help="do not remove the oversampling filters' fixed delay")
    if wanted("render"):
        from solderless.app.hiss_options import add_hiss_options
        add_hiss_options(p)
    p.set_defaults(func=cmd_render)

    p = sub.add_parser("op", help="print the DC operating point")
    _add_design_arg(p, nargs="?")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_op)

    p = sub.add_parser("ac", help="small-signal frequency response and input impedance")
    if wanted("ac"):
        _add_ac_arguments(p)

    p = sub.add_parser("designs", help="list built-in designs and the stage library")
    p.set_defaults(func=cmd_designs)

    for name, module, add_fn, run_fn, help_text in _OPTIONAL:
        if wanted(name):
            _optional(sub, name, module, add_fn, run_fn, help_text)
        else:
            sub.add_parser(name, help=help_text)
    return ap


#: Subcommands whose arguments live in another module (imported only when
#: the command is asked for): name, module, add-arguments, run, help.
_OPTIONAL = (
    ("play", "solderless.app.play", "add_play_arguments", "run_play",
     "play an instrument through a design live"),
    ("devices", "solderless.app.play", "add_devices_arguments", "run_devices",
     "list audio devices"),
    ("source", "solderless.app.source", "add_source_arguments", "cli_source",
     "write a synthetic guitar phrase as a WAV file"),
    ("demo", "solderless.app.demo", "add_demo_arguments", "cli_demo",
     "render the built-in compressor and its variants and write a report"),
    ("gui", "solderless.gui.app", "add_gui_arguments", "run_gui", "open the desktop workbench"),
    ("build", "solderless.app.build", "add_build_arguments", "run_build",
     "write a build sheet, parts list, netlist and connection list"),
    ("montecarlo", "solderless.app.build", "add_montecarlo_arguments",
     "run_montecarlo", "tolerance Monte Carlo: yield, spreads, sensitivity"),
    ("sweep", "solderless.app.build", "add_sweep_arguments", "run_sweep",
     "sweep a part value (and a pot) and tabulate a figure"),
    ("hiss", "solderless.app.hiss", "add_hiss_arguments", "run_hiss",
     "output noise: spectral density and the noise floor (unweighted, A-weighted)"),
)


def _add_ac_arguments(p) -> None:
    from solderless.engine import limits
    from solderless.engine.solver.ac import DEFAULT_FMAX_HZ, DEFAULT_FMIN_HZ, DEFAULT_POINTS
    _add_design_arg(p, nargs="?")
    p.add_argument("--fmin", type=number_in(0, 1e9, "Hz", open_low=True),
                   default=DEFAULT_FMIN_HZ, metavar="HZ",
                   help=f"lowest frequency, Hz (default {DEFAULT_FMIN_HZ:g}; the workbench "
                        "uses the same range)")
    p.add_argument("--fmax", type=number_in(0, 1e9, "Hz", open_low=True),
                   default=DEFAULT_FMAX_HZ, metavar="HZ",
                   help=f"highest frequency, Hz (default {DEFAULT_FMAX_HZ:g})")
    p.add_argument("--points", type=whole_in(2, limits.MAX_AC_POINTS, "points"),
                   default=DEFAULT_POINTS, metavar="N",
                   help=f"number of log-spaced frequencies (default {DEFAULT_POINTS}, at "
                        f"most {limits.MAX_AC_POINTS})")
    p.add_argument("--csv", metavar="FILE", help="write the response as CSV (freq_hz, "
                   "gain_db, phase_deg, zin_ohm, zin_phase_deg)")
    p.set_defaults(func=cmd_ac)


def _optional(sub, name, module, add_fn, run_fn, help_text):
    """Register a subcommand whose arguments live in another module."""
    import importlib
    try:
        mod = importlib.import_module(module)
        add, run = getattr(mod, add_fn), getattr(mod, run_fn)
    except (ImportError, AttributeError) as exc:
        p = sub.add_parser(name, help=help_text + " (unavailable)")
        p.set_defaults(func=lambda a, exc=exc: _unavailable(name, exc))
        return
    p = sub.add_parser(name, help=help_text)
    add(p)
    p.set_defaults(func=run)


def _unavailable(name, exc) -> int:
    print(f"error: '{name}' is not available here: {exc}", file=sys.stderr)
    return 2


def main(argv=None) -> int:
    """Run one command.  Called as the program (``argv`` None), the objects
    left at the end are frozen out of the cyclic garbage collector
    (:func:`gc.freeze`): the interpreter's final collection would otherwise
    walk numba's whole compiler state, ~0.25 s of a one-off render
    (bench/bench_startup.py).  Everything is still released at exit."""
    try:
        return _main(argv)
    finally:
        if argv is None:
            import gc
            gc.freeze()


def _main(argv) -> int:
    ap = build_parser(sys.argv[1:] if argv is None else list(argv))
    args = ap.parse_args(argv)
    if not getattr(args, "func", None):
        ap.print_help()
        return 0
    resolve_aliases(args)
    try:
        return int(args.func(args) or 0)
    except SolderlessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except RecursionError:
        # a last line of defence: inputs are limited long before this
        print("error: the input nests too deeply to read", file=sys.stderr)
        return 2
    except MemoryError:
        print("error: out of memory (the input asks for more than this machine has)",
              file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("stopped", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":
    sys.exit(main())

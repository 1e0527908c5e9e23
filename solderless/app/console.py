"""Terminal control while playing: one short command per line.

Runs on the terminal's thread; every change is an edit
(:mod:`solderless.engine.design.edits`, data) handed to the LiveHost
(:meth:`~solderless.engine.live.host.LiveHost.edit`, mailbox to the edit
worker), the same path the workbench's edits take, never into the engine
directly. A value is read once, here. A user mistake prints one line and the
session goes on.

Commands (``help`` prints them)::

    parts                 list the parts with their values
    pick PART             choose the part the next commands act on
    up [N] / down [N]     step the picked part N places through its E-series
    value V               set the picked part's value (4k7, 100n, 2.2u ...)
    up/down on a pot      steps through the values pots are made in
                          (1, 2, 2.5, 5 per decade: 10k, 20k, 25k, 50k ...)
    turn R                turn the picked pot to R (0 to 1); 'turn +' / 'turn -'
                          nudges by 0.05
    taper LAW             the picked pot's taper: linear, audio, reverse, or
                          custom R:F,R:F,... (rotation:fraction points, 0..1)
    model NAME            give the picked device part another library model
                          (swap diodes or a transistor); 'model' alone lists
                          the models of its kind
    times                 attack and release (63 % of the gain-reduction step);
                          refreshed by itself after each edit
    bypass STAGE          toggle bypass of a stage (rebuild + crossfade): a series
                          stage passes in to out; a side branch (a detector) hears
                          no signal, so the gain cell sits at its resting gain
    hiss on [SEED] / off  the circuit's own noise (thermal, shot, flicker) inside
                          the simulation, switched while playing; SEED (a whole
                          number) picks its random sequence. 'hiss' alone says
                          whether it plays and prints the noise floor at the
                          output (20 Hz-20 kHz, unweighted and A-weighted)
    a / b                 hear (and edit) the baseline or the variant
    level DB              output level in dB
    wait S                let S seconds of audio play (and a pending attack/release
                          readout finish) before the next command
                          (for scripted sessions)
    meters                print the meters now (the first time with what each one means)
    unmute                clear a safety mute (output ramps up again)
    save [PATH]           save the design atomically (its own file by default)
    quit                  stop playing
"""
from __future__ import annotations

import math
from typing import Callable

from solderless.engine.design import edits as E
from solderless.engine.errors import SolderlessError

EDITS = {"up", "down", "value", "turn", "taper", "model", "bypass"}
TAPER_WORDS = {"linear": "linear", "lin": "linear", "audio": "audio", "log": "audio",
               "reverse": "reverse-audio", "reverse-audio": "reverse-audio"}

HELP = __doc__.split("::", 1)[1].rstrip()


def _fmt(x, unit: str) -> str:
    from solderless.engine.values import format_reading
    return format_reading(x, unit)


def _db(x):
    from solderless.engine.live.meters import fmt_db
    return fmt_db(x)


METER_LEGEND = ("in/out: peak and RMS level, dBFS; ctl: the gain cell's control "
                "current; GR: gain reduction from the control (control against its "
                "resting value, 0 dB at rest); GRm: gain reduction measured (output/input "
                "level against the resting small-signal gain at 1 kHz, 0 dB at rest); "
                "LUFS: loudness (ITU-R BS.1770-4, 3 s); cpu: share of the block period. "
                "ctl, GR and GRm show only for a design with a control ([meters] control).")


def meter_line(m: dict) -> str:
    """One line summary of a meter snapshot (for the terminal)."""
    vi = m["voices"].get(m.get("selected", "A")) or m["voices"].get("A", {})
    parts = [f"in {_db(m['input']['peak_dbfs'])} pk {_db(m['input']['rms_dbfs'])} rms dBFS",
             f"out {_db(m['output']['peak_dbfs'])} pk {_db(m['output']['rms_dbfs'])} rms dBFS"]
    if vi.get("control_ua") is not None:
        parts.append(f"ctl {vi['control_ua']:7.2f} uA")
    if vi.get("gr_control_db") is not None:
        parts.append(f"GR {vi['gr_control_db']:5.1f} dB")
    if vi.get("gr_measured_db") is not None:
        parts.append(f"GRm {vi['gr_measured_db']:5.1f} dB")
    if vi.get("loudness_lkfs") is not None:
        parts.append(f"{vi['loudness_lkfs']:5.1f} LUFS")
    if len(m["voices"]) > 1:
        parts.append(f"[{m.get('selected', 'A')}] match {m['loudness_offset_db']:+.1f} LU")
    bad = [k for k in ("input", "output") if m[k].get("invalid")]
    if bad:
        parts.append("INVALID (NaN/inf) " + " and ".join(bad))
    parts.append(f"cpu {100 * m['cpu_load']:3.0f}%")
    if m["xruns"]:
        parts.append(f"xruns {m['xruns']}")
    if m.get("guard"):
        parts.append(f"MUTED: {m['guard']}")
    return " | ".join(parts)


class Console:
    """Reads command lines and drives a LiveHost. ``say`` prints a line."""

    def __init__(self, host, say: Callable[[str], None] = print, timeout: float = 30.0):
        self.host = host
        self.say = say
        self.picked: str | None = None
        self.timeout = timeout
        self._legend_shown = False
        self._times_gen = 0

    def _refresh_times(self) -> None:
        """After an edit, measure attack and release again on a copy of the
        design, on a helper thread, and print them when done (only for a
        design that declares a control)."""
        import copy
        import threading
        try:
            _, v = self.host._voice(None)
        except SolderlessError:
            return
        d = v.design
        if not (hasattr(d, "control_probe") and d.control_probe()):
            return
        self._times_gen += 1
        self._times_thread = threading.Thread(
            target=_refresh_times_job,
            args=(self, copy.deepcopy(d), self._times_gen, self.host.fs),
            daemon=True, name="solderless-times")
        self._times_thread.start()

    def _need_pick(self) -> str:
        if self.picked is None:
            raise SolderlessError("no part picked", hint="type 'pick PART' (see 'parts')")
        return self.picked

    def handle(self, line: str) -> bool:
        """Run one command line; returns False when the user asked to quit."""
        words = line.strip().split()
        if not words:
            return True
        cmd, rest = words[0].lower(), words[1:]
        try:
            go_on = self._run(cmd, rest)
            if cmd in EDITS:
                self._refresh_times()
            return go_on
        except SolderlessError as exc:
            self.say(f"error: {exc}")
        except (ValueError, IndexError) as exc:
            self.say(f"error: cannot read '{line.strip()[:80]}' ({exc}); type 'help'")
        except OSError as exc:
            self.say(f"error: {exc.strerror or exc}"
                     + (f": {exc.filename}" if getattr(exc, "filename", None) else ""))
        except Exception as exc:
            # the console outlives any one command: a failure is reported and
            # the next command (even 'quit') is read as usual
            self.say(f"error: '{cmd}' failed ({type(exc).__name__}: {str(exc)[:200]})")
        return True

    def _run(self, cmd: str, rest: list[str]) -> bool:
        h = self.host
        if cmd in ("quit", "exit", "q"):
            return False
        if cmd in ("help", "?"):
            self.say(HELP)
        elif cmd == "parts":
            _, v = h._voice(None)
            for p in v.design.parts():
                if p.value is None:
                    continue
                extra = f"  rotation {p.rotation:.2f}" if p.is_pot else ""
                mark = "*" if p.qualname == self.picked else " "
                self.say(f"{mark} {p.qualname:<22} {_fmt(p.value, p.unit):>12}{extra}")
            for p in v.design.parts():
                if p.value is None and p.model:
                    mark = "*" if p.qualname == self.picked else " "
                    self.say(f"{mark} {p.qualname:<22} {p.type} model {p.model}")
        elif cmd == "pick":
            info = h.part_info(rest[0])
            self.picked = info.qualname
            extra = f", rotation {info.rotation:.2f}" if info.is_pot else ""
            if info.value is None:          # a device: it has a model, not a value
                self.say(f"picked {info.qualname} ({info.type}, model {info.model})")
            else:
                self.say(f"picked {info.qualname} = {_fmt(info.value, info.unit)}{extra}")
        elif cmd in ("up", "down"):
            part = self._need_pick()
            n = int(rest[0]) if rest else 1
            new = h.step_value(part, n if cmd == "up" else -n).result(self.timeout)
            self.say(f"{part} = {_fmt(new, h.part_info(part).unit)}")
        elif cmd == "value":
            from solderless.engine.values import parse_value
            part = self._need_pick()
            info = h.part_info(part)
            v = parse_value(rest[0], unit=info.unit or None, part=part)
            h.edit(E.SetValue(part, v)).result(self.timeout)
            self.say(f"{part} = {_fmt(v, info.unit)}")
            from solderless.engine.sanity import value_warning
            w = value_warning(part, info.unit, v)
            if w:
                self.say(f"warning: {w}")
        elif cmd == "turn":
            part = self._need_pick()
            info = h.part_info(part)
            if rest[0] in ("+", "-"):
                r = (info.rotation or 0.0) + (0.05 if rest[0] == "+" else -0.05)
            else:
                r = float(rest[0])
            r = min(1.0, max(0.0, r)) if rest[0] in ("+", "-") else r
            if not 0.0 <= r <= 1.0:
                raise SolderlessError(f"rotation must be from 0 to 1, not {rest[0]}")
            fut = h.edit(E.SetRotation(part, r))
            if fut.done() and fut.exception() is not None:
                raise fut.exception()
            # the ramp runs in the background: the console answers at once,
            # and a failure is reported when the ramp ends
            fut.add_done_callback(lambda f, p=part: f.exception() is not None and
                                  self.say(f"error: {p}: {f.exception()}"))
            self.say(f"{part} rotation {r:.2f}")
        elif cmd == "taper":
            part = self._need_pick()
            if not h.part_info(part).is_pot:
                raise SolderlessError("only a pot has a taper", part=part)
            law = rest[0].lower()
            if law == "custom":
                pts = [[float(a) for a in p.split(":")] for p in "".join(rest[1:]).split(",")
                       if p]
                if any(len(p) != 2 for p in pts):
                    raise ValueError("write custom points as rotation:fraction, e.g. "
                                     "custom 0:0,0.5:0.15,1:1")
                taper = pts
            elif law in TAPER_WORDS:
                taper = TAPER_WORDS[law]
            else:
                raise SolderlessError(f"unknown taper '{rest[0]}'",
                                      hint="linear, audio, reverse or custom R:F,R:F,...")
            got = h.edit(E.SetTaper(part, taper)).result(self.timeout)
            info = h.part_info(part)
            from solderless.engine.design import taper_fraction
            self.say(f"{part} taper {got if isinstance(got, str) else 'custom'}: at rotation "
                     f"{info.rotation:.2f} the wiper sits at "
                     f"{100 * taper_fraction(info.taper, info.rotation):.1f} % of the track")
        elif cmd == "model":
            part = self._need_pick()
            _, v = h._voice(None)
            info = h.part_info(part)
            if not rest:
                from solderless.engine.design import MODEL_KIND, models_of_kind
                kind = MODEL_KIND.get(info.type)
                if kind is None:
                    raise SolderlessError(f"a {info.type} has no device model", part=part)
                self.say(f"{part} is {info.model}; models of its kind: "
                         + ", ".join(models_of_kind(v.design, kind)))
            else:
                got = h.edit(E.SetModel(part, rest[0])).result(self.timeout)
                self.say(f"{part} model {got} (rebuilt)")
        elif cmd == "times":
            from solderless.engine.analysis.timing import attack_release, describe
            _, v = h._voice(None)
            self.say(describe(attack_release(v.design, fs=h.fs)))
        elif cmd == "bypass":
            stage = rest[0]
            _, v = h._voice(None)
            cur = _bypassed(v.design, stage)
            t = h.set_bypass(stage, not cur).result(self.timeout)
            what = ""
            if not cur and hasattr(v.design, "bypass_effect"):
                what = f": {v.design.bypass_effect(stage)}"
            self.say(f"stage {stage} {'bypassed' if not cur else 'back in'}{what} "
                     f"(rebuilt in {1e3 * t:.0f} ms)")
            if hasattr(v.design, "dangling_probes"):
                for w in v.design.dangling_probes():
                    self.say(f"warning: {w}")
        elif cmd == "hiss":
            self._hiss(rest)
        elif cmd in ("a", "b"):
            h.select(cmd.upper())
            self.say(f"hearing {cmd.upper()} (loudness offset {h.loudness_offset_db:+.1f} LU)")
        elif cmd == "level":
            from solderless.engine.live.limits import check_level_db
            db = check_level_db(rest[0])
            h.set_level_db(db)
            self.say(f"output level {db:+.1f} dB")
        elif cmd == "wait":
            import time
            secs = float(rest[0])
            if not 0 <= secs <= 600:
                raise SolderlessError(f"wait {rest[0]}: give 0 to 600 seconds")
            goal = h.blocks + int(math.ceil(secs * h.fs / h.block))
            t_end = time.monotonic() + 10 * secs + 30
            while h.blocks < goal and time.monotonic() < t_end and h.error is None:
                time.sleep(0.01)
                h.meters()              # keep the meter ring drained
            # and let a pending attack/release refresh print its line
            th = getattr(self, "_times_thread", None)
            if th is not None:
                th.join(max(0.0, t_end - time.monotonic()))
        elif cmd == "meters":
            self.say(meter_line(h.meters()))
            if not self._legend_shown:
                self.say(METER_LEGEND)
                self._legend_shown = True
        elif cmd == "unmute":
            h.unmute()
            self.say("unmuted; output ramps up from silence")
        elif cmd == "save":
            path = h.save(rest[0] if rest else None).result(self.timeout)
            self.say(f"saved {path}")
        else:
            self.say(f"unknown command '{cmd}'; type 'help'")
        return True


    def _hiss(self, rest: list[str]) -> None:
        """``hiss``, ``hiss on [SEED]``, ``hiss off``: the SetHiss edit."""
        from solderless.engine.analysis.noise import floor_line, floor_summary
        from solderless.engine.live.host import hiss_of
        h = self.host
        if len(rest) > 2 or (rest and rest[0].lower() not in ("on", "off")) or \
                (len(rest) == 2 and rest[0].lower() == "off"):
            raise SolderlessError(f"hiss {' '.join(rest)[:40]}: say 'hiss on', 'hiss on SEED' "
                                  "or 'hiss off'", hint="SEED is a whole number, e.g. hiss on 7")
        if rest:
            seed = None
            if len(rest) == 2:
                if not rest[1].isdigit():
                    raise SolderlessError(f"hiss on {rest[1][:40]}: the seed is a whole "
                                          "number from 0, e.g. hiss on 7")
                seed = int(rest[1])
            h.edit(E.SetHiss(rest[0].lower() == "on", seed)).result(self.timeout)
        _, v = h._voice(None)
        on, seed = hiss_of(v.design)
        if on:
            self.say(floor_line(floor_summary(v.design.flatten(), seed)))
        else:
            self.say(f"hiss off (seed {seed}): the simulation plays no noise; 'hiss on' "
                     "switches it on")


def _refresh_times_job(console, design, gen, fs):
    import time
    from solderless.engine.analysis.timing import attack_release, describe
    time.sleep(0.3)                     # a burst of edits (up, up, up) measures once
    if gen != console._times_gen:
        return
    try:
        line = describe(attack_release(design, fs=fs))
    except Exception as exc:            # a readout must never stop the session
        line = f"attack/release: could not measure ({exc})"
    if gen == console._times_gen:       # a newer edit supersedes this one
        console.say("times: " + line)


def _bypassed(design, stage: str) -> bool:
    """Whether ``stage`` of ``design`` is bypassed now (False if unknown)."""
    if hasattr(design, "stage"):
        try:
            return bool(design.stage(stage).bypass)
        except Exception:
            return False
    return bool(getattr(design, "bypass", {}).get(stage, False))


def finite(x) -> bool:
    return x is not None and math.isfinite(x)

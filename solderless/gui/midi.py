"""Physical knobs: a MIDI controller's knobs (control-change messages) turn
the design's pots.

Learn mode: press Learn, turn a pot in the workbench, then turn a knob; the
knob now turns that pot. A knob's position (0 to 127) is the pot's rotation
(0 to 1), so the pot's own taper applies to it exactly as to the dial, and
the move takes the dial's path (the workbench edit, then the live host's
ramped pot change): the same smoothing as a mouse move. Several messages
arriving between two polls collapse to the last position per pot.

Mappings are saved with the design, in its ``[midi]`` table
(docs/design-format.md)::

    [[midi.knob]]
    pot = "output.VOLUME"
    channel = 1          # MIDI channel, 1 to 16
    cc = 7               # control-change number, 0 to 127

Ports come from ``mido`` with the ``python-rtmidi`` backend; anything with
``iter_pending()`` and ``close()`` can stand in for one (tests). Without a
MIDI system the workbench says so and carries on.
"""
from __future__ import annotations

from typing import Any, Callable

from PyQt6.QtCore import QObject, QTimer, pyqtSignal

from solderless.engine.errors import SolderlessError

POLL_MS = 10
"""How often pending MIDI messages are read (a knob sweep sends about 100
messages a second; 10 ms keeps up without a thread)."""
CC_MAX = 127


class MidiUnavailable(SolderlessError):
    """No MIDI input can be opened (package, backend or port missing)."""


def input_names() -> list[str]:
    """Names of the MIDI input ports (raises MidiUnavailable with the reason)."""
    mido = _mido()
    try:
        return list(mido.get_input_names())
    except Exception as exc:  # rtmidi raises its own error classes
        raise MidiUnavailable(f"no MIDI system is available ({_short(exc)})",
                              hint="connect a controller; on Linux the ALSA sequencer "
                                   "(/dev/snd/seq) must be present") from None


def open_input(name: str | None = None):
    """Open a MIDI input port by name (the first one when None)."""
    mido = _mido()
    names = input_names()
    if not names:
        raise MidiUnavailable("no MIDI input port found", hint="connect a controller")
    if name is not None and name not in names:
        raise MidiUnavailable(f"no MIDI input port named '{name}'",
                              hint="ports: " + ", ".join(names))
    try:
        return mido.open_input(name or names[0])
    except Exception as exc:
        raise MidiUnavailable(f"could not open MIDI port '{name or names[0]}' "
                              f"({_short(exc)})") from None


def _mido():
    try:
        import mido
    except ImportError:
        raise MidiUnavailable("MIDI knobs need the 'mido' and 'python-rtmidi' packages",
                              hint="pip install mido python-rtmidi") from None
    try:
        mido.set_backend("mido.backends.rtmidi", load=True)
    except Exception as exc:
        raise MidiUnavailable(f"the MIDI backend could not be loaded ({_short(exc)})",
                              hint="pip install python-rtmidi") from None
    return mido


def _short(exc: BaseException) -> str:
    return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__


# ------------------------------------------------------------ mappings in the design

def knob_map(design) -> dict[tuple[int, int], str]:
    """The design's knob mappings: ``{(channel 1-16, cc 0-127): pot}``."""
    doc = getattr(design, "doc", None)
    midi = doc.get("midi") if doc is not None else None
    out: dict[tuple[int, int], str] = {}
    if not midi:
        return out
    pots = {p.qualname for p in design.parts() if p.type == "pot"}
    for i, k in enumerate(midi.get("knob", []) or []):
        where = f"[[midi.knob]] {i + 1}"
        try:
            pot, ch, cc = str(k["pot"]), int(k.get("channel", 1)), int(k["cc"])
        except (KeyError, TypeError, ValueError):
            raise SolderlessError(f"{where}: a knob needs pot, cc (0-127) and channel "
                                  "(1-16)", file=str(design.path) if design.path else None,
                                  hint='for example pot = "output.VOLUME", channel = 1, '
                                       'cc = 7') from None
        if not (1 <= ch <= 16 and 0 <= cc <= CC_MAX):
            raise SolderlessError(f"{where}: channel {ch} / cc {cc} out of range "
                                  "(channel 1-16, cc 0-127)",
                                  file=str(design.path) if design.path else None, part=pot)
        if pot not in pots:
            raise SolderlessError(f"{where}: no pot named '{pot}'",
                                  file=str(design.path) if design.path else None, part=pot,
                                  hint="pots: " + ", ".join(sorted(pots)))
        out[(ch, cc)] = pot
    return out


def knob_table(mapping: dict[tuple[int, int], str]) -> dict | None:
    """``mapping`` as the design file's ``[midi]`` table, plain data (None
    when empty), for a :class:`solderless.engine.design.edits.SetDocumentTable`
    edit."""
    if not mapping:
        return None
    return {"knob": [{"pot": pot, "channel": ch, "cc": cc} for (ch, cc), pot in
                     sorted(mapping.items(), key=lambda kv: (kv[1], kv[0]))]}


def set_knob_map(design, mapping: dict[tuple[int, int], str]) -> None:
    """Write ``mapping`` into the design's ``[midi]`` table (kept on save)."""
    import tomlkit
    doc = design.doc
    if doc is None:
        raise SolderlessError("this design has no file document to keep knob mappings in")
    if not mapping:
        if "midi" in doc:
            del doc["midi"]
        return
    aot = tomlkit.aot()
    for (ch, cc), pot in sorted(mapping.items(), key=lambda kv: (kv[1], kv[0])):
        t = tomlkit.table()
        t["pot"] = pot
        t["channel"] = ch
        t["cc"] = cc
        aot.append(t)
    midi = tomlkit.table()
    midi["knob"] = aot
    doc["midi"] = midi


# ------------------------------------------------------------ the live link

class MidiKnobs(QObject):
    """Reads a MIDI port, learns knob mappings and turns pots.

    ``turn(pot, rotation)`` is the dial's own edit path (the workbench's
    ``set_rotation``); ``remember(mapping)`` stores mappings in the design
    (an undoable edit). Signals: ``learned(pot, channel, cc)``,
    ``message(text)``."""
    learned = pyqtSignal(str, int, int)
    message = pyqtSignal(str)

    def __init__(self, turn: Callable[[str, float], Any],
                 remember: Callable[[dict], Any], parent=None):
        super().__init__(parent)
        self.turn = turn
        self.remember = remember
        self.port = None
        self.mapping: dict[tuple[int, int], str] = {}
        self.learning = False
        self.armed: str | None = None          # the pot last turned in learn mode
        self.timer = QTimer(self)
        self.timer.timeout.connect(self.poll)

    def attach(self, port) -> None:
        """Read from ``port`` (a mido input port or a stand-in)."""
        self.detach()
        self.port = port
        self.timer.start(POLL_MS)

    def detach(self) -> None:
        self.timer.stop()
        p, self.port = self.port, None
        if p is not None:
            try:
                p.close()
            except Exception:
                pass

    def set_mapping(self, mapping: dict[tuple[int, int], str]) -> None:
        self.mapping = dict(mapping)

    def learn(self, on: bool) -> None:
        self.learning = bool(on)
        self.armed = None
        if on:
            self.message.emit("MIDI learn: turn a pot in the workbench, then turn a knob")

    def pot_turned(self, pot: str) -> None:
        """A pot was turned in the workbench (learn mode arms it)."""
        if self.learning:
            self.armed = pot
            self.message.emit(f"MIDI learn: now turn a knob for {pot}")

    def poll(self) -> int:
        """Read pending messages; learn or turn pots. Returns how many pots moved."""
        if self.port is None:
            return 0
        latest: dict[str, float] = {}
        try:
            msgs = list(self.port.iter_pending())
        except Exception as exc:
            self.message.emit(f"MIDI port stopped ({_short(exc)}); knobs detached")
            self.detach()
            return 0
        for m in msgs:
            if getattr(m, "type", None) != "control_change":
                continue
            key = (int(m.channel) + 1, int(m.control))
            if self.learning and self.armed is not None:
                pot = self.armed
                # one knob per pot and one pot per knob
                self.mapping = {k: p for k, p in self.mapping.items() if p != pot}
                self.mapping[key] = pot
                self.learning = False
                self.armed = None
                self.remember(dict(self.mapping))
                self.learned.emit(pot, key[0], key[1])
                self.message.emit(f"knob CC {key[1]} (channel {key[0]}) turns {pot}")
                continue
            pot = self.mapping.get(key)
            if pot is not None:
                latest[pot] = min(max(int(m.value), 0), CC_MAX) / CC_MAX
        for pot, rot in latest.items():
            try:
                self.turn(pot, rot)
            except SolderlessError as exc:
                self.message.emit(str(exc))
        return len(latest)

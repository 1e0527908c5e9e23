"""Input sources for the live host: the sound card input, a WAV file in a
loop, the built-in synthetic instrument in a loop, or a test tone.

Every source fills a float64 block with **volts at the input jack**.
:meth:`Source.fill` runs on the audio thread: no allocation (loops are
pre-rendered), no file access. Everything slow happens in the constructor.
"""
from __future__ import annotations

import math
from pathlib import Path

import numba
import numpy as np

from solderless.engine.errors import AudioError


@numba.njit(nogil=True, cache=True)
def _loop_copy(src, pos, out, n):  # pragma: no cover - compiled
    m = src.shape[0]
    for i in range(n):
        out[i] = src[pos]
        pos += 1
        if pos >= m:
            pos = 0
    return pos


@numba.njit(nogil=True, cache=True)
def _scale_clamp(src, scale, out, n):  # pragma: no cover - compiled
    """out = src * scale, with samples outside full scale clamped to it and
    non-finite samples set to 0 (a converter cannot deliver more than full
    scale; a driver fault can)."""
    for i in range(n):
        v = src[i]
        if not np.isfinite(v):
            v = 0.0
        elif v > 1.0:
            v = 1.0
        elif v < -1.0:
            v = -1.0
        out[i] = v * scale


class Source:
    """Base class. ``needs_input`` says whether a capture stream is needed."""
    needs_input = False
    label = "silence"

    def prepare(self, fs: float, full_scale_v: float) -> None:
        """Called once before streaming (not on the audio thread)."""

    def fill(self, indata, n: int, out: np.ndarray) -> None:
        """Write ``n`` samples of volts into ``out`` (audio thread)."""
        out[:n] = 0.0


class LiveInput(Source):
    """One channel of the sound card input, scaled by the input calibration
    (full-scale peak volts at the jack). Samples beyond full scale are clamped
    to it and non-finite ones zeroed, so a faulty driver cannot feed the
    circuit impossible voltages."""
    needs_input = True

    def __init__(self, channel: int = 0):
        self.channel = int(channel)
        self.scale = 1.0
        self.label = f"input channel {self.channel + 1}"

    def prepare(self, fs, full_scale_v):
        self.scale = float(full_scale_v)
        z = np.zeros((4, self.channel + 1), dtype=np.float32)
        _scale_clamp(z[:, self.channel], 1.0, np.zeros(4), 4)   # compile before streaming

    def fill(self, indata, n, out):
        if indata is None:
            out[:n] = 0.0
        else:
            _scale_clamp(indata[:, self.channel], self.scale, out, n)


class LoopSource(Source):
    """A pre-rendered buffer of volts, played in a loop."""

    def __init__(self, volts: np.ndarray, label: str = "loop"):
        self.volts = np.ascontiguousarray(volts, dtype=np.float64)
        if self.volts.ndim != 1 or self.volts.size == 0:
            raise AudioError("the loop has no samples", hint="use a non-empty mono signal")
        self.pos = 0
        self.label = label

    def fill(self, indata, n, out):
        self.pos = _loop_copy(self.volts, self.pos, out, n)


class WavLoop(LoopSource):
    """A WAV (or any soundfile-readable) file in a loop. The file's samples are
    full-scale units; the input calibration turns them into volts. The file is
    resampled to the stream rate (polyphase, scipy) if its rate differs."""

    def __init__(self, path: str, channel: int = 0):
        self.path = str(path)
        self.channel = int(channel)
        self.label = f"loop of {Path(path).name}"
        self.volts = np.zeros(1)
        self.pos = 0

    def prepare(self, fs, full_scale_v):
        import soundfile
        from scipy.signal import resample_poly
        try:
            data, rate = soundfile.read(self.path, dtype="float64", always_2d=True)
        except (RuntimeError, OSError) as exc:  # soundfile raises RuntimeError
            raise AudioError(f"cannot read the audio file: {exc}", file=self.path,
                             hint="give a WAV/FLAC/OGG file that exists") from None
        if data.shape[0] == 0:
            raise AudioError("the audio file is empty", file=self.path)
        ch = min(self.channel, data.shape[1] - 1)
        x = data[:, ch]
        bad = ~np.isfinite(x)
        if bad.any():   # NaN/inf samples: silence them (a converter cannot make them)
            x = np.where(bad, 0.0, x)
            self.label += f" ({int(bad.sum())} NaN/inf samples set to 0)"
        if int(rate) != int(fs):
            g = math.gcd(int(rate), int(fs))
            x = resample_poly(x, int(fs) // g, int(rate) // g)
        self.volts = np.ascontiguousarray(x * full_scale_v)


class SynthLoop(LoopSource):
    """The built-in synthetic instrument (``solderless.engine.synth.render_phrase``),
    which already returns volts at the jack; played in a loop."""

    def __init__(self, phrase: str = "demo", pickup: str | None = None):
        self.phrase = phrase
        self.pickup = pickup
        self.label = f"synthetic instrument '{phrase}'"
        self.volts = np.zeros(1)
        self.pos = 0

    def prepare(self, fs, full_scale_v):
        try:
            from solderless.engine import synth
        except ImportError:
            raise AudioError("the synthetic instrument is not available in this build",
                             hint="use --source FILE.wav or a tone") from None
        kw = {} if self.pickup is None else {"pickup": self.pickup}
        v = synth.render_phrase(self.phrase, fs, **kw)   # SolderlessError names the phrases
        self.volts = np.ascontiguousarray(np.asarray(v, dtype=np.float64).reshape(-1))


class ToneSource(LoopSource):
    """A sine of ``freq`` Hz and ``peak_v`` volts peak at the jack. The loop
    holds a whole number of periods, so it repeats without a seam."""

    def __init__(self, freq: float = 1000.0, peak_v: float = 0.1):
        self.freq = float(freq)
        self.peak_v = float(peak_v)
        self.label = f"tone {self.freq:g} Hz, {self.peak_v:g} V peak"
        self.volts = np.zeros(1)
        self.pos = 0

    def prepare(self, fs, full_scale_v):
        # length: one second rounded to whole periods (exact for integer Hz)
        periods = max(1, round(self.freq))
        n = int(round(periods * fs / self.freq))
        t = np.arange(n) / n
        self.volts = self.peak_v * np.sin(2 * np.pi * periods * t)


def parse_source(text: str | None, input_channel: int = 0) -> Source:
    """Read a ``--source`` argument: ``input`` (default), ``synth[:PHRASE]``,
    ``tone[:HZ[:VOLTS_PEAK]]``, or a path to an audio file."""
    from solderless.engine.values import parse_value
    if text is None or text == "input":
        return LiveInput(input_channel)
    if text == "silence":
        return Source()
    if text.startswith("synth"):
        _, _, phrase = text.partition(":")
        return SynthLoop(phrase or "demo")
    if text.startswith("tone"):
        bits = text.split(":")
        try:
            f = parse_value(bits[1], unit="Hz") if len(bits) > 1 and bits[1] else 1000.0
            v = parse_value(bits[2], unit="V") if len(bits) > 2 and bits[2] else 0.1
        except Exception as exc:
            raise AudioError(f"cannot read the tone '{text}': {exc}",
                             hint="write tone:1k:100m for 1 kHz at 100 mV peak") from None
        import math
        if not (math.isfinite(f) and 1.0 <= f <= 40000.0):
            raise AudioError(f"the tone's frequency {f:g} Hz is out of range",
                             hint="give 1 Hz to 40 kHz, e.g. tone:1k:100m")
        if not (math.isfinite(v) and 0.0 <= abs(v) <= 100.0):
            raise AudioError(f"the tone's level {v:g} V peak is out of range",
                             hint="give 0 to 100 V peak, e.g. tone:1k:100m")
        return ToneSource(f, v)
    p = Path(text)
    if not p.exists():
        raise AudioError(f"no such audio file: {text}",
                         hint="use input, synth, tone:1k:100m or a path to a WAV file")
    from solderless.engine import limits
    from solderless.engine.fileio import check_input_file
    check_input_file(p, what="audio file", limit=limits.MAX_AUDIO_BYTES)
    return WavLoop(text, 0)

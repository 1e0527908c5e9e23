"""A synthetic guitar at the output jack, so no recording is needed to play.

Strings are plucked-string waveguide loops after Karplus & Strong ("Digital
synthesis of plucked-string and drum timbres", Computer Music Journal 7(2),
1983) with the extensions of Jaffe & Smith ("Extensions of the Karplus-Strong
plucked-string algorithm", Computer Music Journal 7(2), 1983):

* pick-direction lowpass on the excitation, ``(1-p) / (1 - p z^-1)``;
* pick-position comb on the excitation, ``1 - z^-round(beta*P)``;
* dynamic level lowpass: soft notes keep mostly a lowpassed excitation;
* string damping / brightness filter in the loop, a linear-phase 3-tap
  lowpass ``c + a z^-1 + c z^-2`` (``c = (1-a)/2``, ``a`` in [0.5, 1]);
* decay shortening (loop gain ``rho``) and decay stretching (the two-point
  filter ``(1-S) + S z^-1``, ``S`` in [0, 0.5]) so that the fundamental
  falls by 60 dB in the requested time;
* a first-order allpass fractional delay whose coefficient is solved from its
  exact phase delay at the fundamental, so the loop's total phase delay is
  ``fs/f0`` and the pitch is exact (not only its low-frequency approximation).

Notes come from standard tuning (E2 A2 D3 G3 B3 E4, MIDI 40 45 50 55 59 64)
with equal temperament, A4 = 440 Hz (ISO 16:1975).

The strings' sum is then shaped and scaled as a passive magnetic pickup at
the jack: an EMF in series with the coil's resistance ``R`` and inductance
``L``, loaded by the coil's own capacitance plus the cable's, the guitar's
volume and tone pots, and the pedal's input resistance. That second-order
lowpass peaks near ``1/(2 pi sqrt(L C))`` (the loaded resonance, 2-5 kHz).
The figures in :data:`PICKUPS` are common practice (docs/references.md), not
measurements of any product. :attr:`Pickup.series_resistance` is the coil
resistance for the design's input source; rendering already includes the
resonance with a high-impedance (1 Mohm) pedal input, so adding the series
resistance again in the circuit changes the level by well under 1 % for an
input impedance of 500 kohm or more.

Nothing here runs on the audio thread: rendering allocates freely.

Example
-------
>>> x = render_phrase("notes", fs=48000.0, pickup="single-coil", seed=0)
>>> write_wav("di.wav", x, 48000.0, fs_volts=1.0)   # doctest: +SKIP
"""
from __future__ import annotations

import zlib
from dataclasses import dataclass
from math import pi, sqrt

import numba
import numpy as np
from scipy import optimize, signal

from solderless.engine.errors import SolderlessError

A4_HZ = 440.0  # ISO 16:1975 standard tuning frequency
#: Standard guitar tuning, low to high string (MIDI note numbers E2 .. E4).
STANDARD_TUNING_MIDI = (40, 45, 50, 55, 59, 64)


def midi_to_hz(note: float) -> float:
    """Equal-tempered frequency in Hz of MIDI note ``note`` (69 = A4 = 440 Hz)."""
    return A4_HZ * 2.0 ** ((note - 69.0) / 12.0)


def string_fret_hz(string: int, fret: int) -> float:
    """Frequency of ``fret`` on ``string`` (0 = low E .. 5 = high E), standard tuning."""
    return midi_to_hz(STANDARD_TUNING_MIDI[string] + fret)


# ----------------------------------------------------------------- pickups
@dataclass(frozen=True)
class Pickup:
    """A passive magnetic pickup with its cable and load (SI units).

    Figures are common practice (docs/references.md, "Guitar pickups and pedals").

    Attributes
    ----------
    inductance : coil inductance L, H.
    resistance : coil DC resistance, ohm (the source's series resistance).
    coil_capacitance : coil self-capacitance, F.
    cable_length : guitar cable length, m.
    cable_capacitance_per_m : F/m.
    controls_resistance : the guitar's volume and tone pots in parallel, ohm.
    load_resistance : the pedal input the jack sees, ohm.
    emf_peak : EMF peak in V of a single note picked at full velocity.
    description : a line for listings.
    """
    inductance: float
    resistance: float
    coil_capacitance: float
    cable_length: float
    cable_capacitance_per_m: float
    controls_resistance: float
    load_resistance: float
    emf_peak: float
    description: str

    @property
    def capacitance(self) -> float:
        """Total shunt capacitance at the jack, F (coil plus cable)."""
        return self.coil_capacitance + self.cable_length * self.cable_capacitance_per_m

    @property
    def shunt_resistance(self) -> float:
        """Controls and pedal input in parallel, ohm."""
        return 1.0 / (1.0 / self.controls_resistance + 1.0 / self.load_resistance)

    @property
    def resonance(self) -> float:
        """Undamped loaded resonance 1/(2 pi sqrt(L C)), Hz."""
        return 1.0 / (2.0 * pi * sqrt(self.inductance * self.capacitance))

    @property
    def series_resistance(self) -> float:
        """Source resistance to put in series with the design's input, ohm."""
        return self.resistance

    def analog_tf(self) -> tuple[np.ndarray, np.ndarray]:
        """Jack voltage / EMF as an analog transfer function ``(b, a)`` in s.

        EMF -> R + sL -> jack; jack to ground: C || R_shunt. So
        ``H(s) = 1 / (L C s^2 + (R C + L/R_shunt) s + 1 + R/R_shunt)``.
        """
        L, R, C, Rs = self.inductance, self.resistance, self.capacitance, self.shunt_resistance
        return np.array([1.0]), np.array([L * C, R * C + L / Rs, 1.0 + R / Rs])


PICKUPS: dict[str, Pickup] = {
    # common practice, docs/references.md: single coil 5-7 kohm, 2-3 H; controls
    # 250 kohm volume + 250 kohm tone; coil ~100 pF; cable ~100 pF/m.
    "single-coil": Pickup(inductance=2.5, resistance=6.0e3, coil_capacitance=100e-12,
                          cable_length=3.0, cable_capacitance_per_m=100e-12,
                          controls_resistance=125e3, load_resistance=1e6,
                          emf_peak=0.10,
                          description="passive single coil, 2.5 H, 6 kohm, 3 m cable"),
    # common practice, docs/references.md: humbucker 7.5-16 kohm, 4-5 H; controls
    # 500 kohm volume + 500 kohm tone.
    "humbucker": Pickup(inductance=4.5, resistance=9.0e3, coil_capacitance=100e-12,
                        cable_length=3.0, cable_capacitance_per_m=100e-12,
                        controls_resistance=250e3, load_resistance=1e6,
                        emf_peak=0.10,
                        description="passive humbucker, 4.5 H, 9 kohm, 3 m cable"),
}


def _pickup(name: str) -> Pickup:
    try:
        return PICKUPS[name]
    except KeyError:
        raise SolderlessError(f"unknown pickup {name!r}", part="source",
                              hint="choose one of: " + ", ".join(PICKUPS)) from None


def pickup_sos(pickup: str | Pickup, fs: float) -> np.ndarray:
    """Digital pickup filter (second-order sections) at rate ``fs``.

    The analog response of :meth:`Pickup.analog_tf` is mapped with the
    bilinear transform, prewarped so the undamped resonance lands exactly
    (Oppenheim & Schafer, *Discrete-Time Signal Processing*, bilinear
    transform with frequency prewarping).
    """
    p = pickup if isinstance(pickup, Pickup) else _pickup(pickup)
    b, a = p.analog_tf()
    w0 = 2.0 * pi * p.resonance
    if w0 / fs >= 0.9 * pi:  # resonance near Nyquist: no prewarp possible
        k = fs
    else:
        k = w0 / (2.0 * np.tan(w0 / (2.0 * fs)))
    bz, az = signal.bilinear(b, a, fs=k)
    return signal.tf2sos(bz, az)


def apply_pickup(emf: np.ndarray, fs: float, pickup: str | Pickup = "single-coil") -> np.ndarray:
    """Return the jack voltage for EMF ``emf`` (V) through the pickup's loaded resonance."""
    return signal.sosfilt(pickup_sos(pickup, fs), np.asarray(emf, dtype=np.float64))


# ------------------------------------------------------------- string model
@numba.njit(nogil=True, cache=True)
def _string_loop(exc, N, S, alpha, C, rho, out):  # pragma: no cover - compiled
    """Run the string loop: ``out[n] = exc[n] + rho * A(B(H_S(out[n-N])))``.

    ``H_S = (1-S) + S z^-1``; ``B = c + alpha z^-1 + c z^-2`` with
    ``c = (1-alpha)/2``; ``A = (C + z^-1) / (1 + C z^-1)``.
    """
    n_exc = exc.shape[0]
    c = 0.5 * (1.0 - alpha)
    s1 = 0.0  # H_S output, one and two samples back
    s2 = 0.0
    b1 = 0.0  # B output one sample back (allpass input history)
    a1 = 0.0  # allpass output one sample back
    for n in range(out.shape[0]):
        d0 = out[n - N] if n >= N else 0.0
        d1 = out[n - N - 1] if n >= N + 1 else 0.0
        s0 = (1.0 - S) * d0 + S * d1
        b0 = c * s0 + alpha * s1 + c * s2
        a0 = C * b0 + b1 - C * a1
        s2 = s1
        s1 = s0
        b1 = b0
        a1 = a0
        e = exc[n] if n < n_exc else 0.0
        out[n] = e + rho * a0


def _two_point_phase_delay(S: float, w: float) -> float:
    """Phase delay in samples of ``(1-S) + S z^-1`` at ``w`` rad/sample."""
    return np.arctan2(S * np.sin(w), (1.0 - S) + S * np.cos(w)) / w


def _two_point_gain(S: float, w: float) -> float:
    return abs((1.0 - S) + S * np.exp(-1j * w))


def _allpass_phase_delay(C: float, w: float) -> float:
    """Phase delay in samples of ``(C + z^-1) / (1 + C z^-1)`` at ``w`` rad/sample."""
    z1 = np.exp(-1j * w)
    return -np.angle((C + z1) / (1.0 + C * z1)) / w


@dataclass(frozen=True)
class StringLoop:
    """Loop parameters for one note (see :func:`design_string`)."""
    N: int          # integer delay, samples
    S: float        # decay-stretching two-point coefficient
    alpha: float    # brightness filter centre tap
    C: float        # allpass coefficient
    rho: float      # loop gain (decay shortening)
    period: float   # target loop delay fs/f0, samples


def default_decay(freq: float) -> float:
    """Typical time (s) for a plucked guitar string's fundamental to fall 60 dB.

    Low strings ring longer; about 8 s at 82 Hz down to 3 s near 1 kHz
    (common practice; from memory).
    """
    return float(np.clip(8.0 * (82.4 / freq) ** 0.4, 2.5, 8.0))


def design_string(freq: float, fs: float, brightness: float = 0.8,
                  decay: float | None = None) -> StringLoop:
    """Choose loop delay, filters and gain for pitch ``freq`` and 60 dB decay time ``decay``.

    Tuning (Jaffe & Smith 1983): the loop's phase delay at the fundamental,
    integer delay + two-point filter + 1 sample (linear-phase brightness
    filter) + allpass, is made equal to ``fs/freq`` by solving the allpass
    coefficient from its exact phase delay (scipy.optimize.brentq).

    Decay: the loop gain at the fundamental must be ``10**(-3/(freq*decay))``
    per period. ``rho < 1`` shortens the decay; if even ``rho = 1`` with
    ``S = 0.5`` is too lossy, ``S`` is moved toward 0 to stretch it.
    """
    if not (0.0 < freq < 0.25 * fs):
        raise SolderlessError(f"note frequency {freq:g} Hz is out of range",
                              part="source", hint=f"use 20 Hz .. {0.25 * fs:g} Hz")
    brightness = float(np.clip(brightness, 0.0, 1.0))
    decay = default_decay(freq) if decay is None else float(decay)
    if decay <= 0.0:
        raise SolderlessError(f"decay time {decay:g} s must be positive", part="source")
    w = 2.0 * pi * freq / fs
    period = fs / freq
    alpha = 0.5 + 0.5 * brightness
    g_b = abs(alpha + (1.0 - alpha) * np.cos(w))  # |B| (linear phase, delay 1)
    g_target = 10.0 ** (-3.0 / (freq * decay))
    S = 0.5
    if g_b * _two_point_gain(0.5, w) >= g_target:
        rho = g_target / (g_b * _two_point_gain(0.5, w))
    else:
        rho = 1.0
        if g_b <= g_target:
            S = 0.0  # cannot ring longer than the brightness filter allows
        else:
            S = optimize.brentq(lambda s: g_b * _two_point_gain(s, w) - g_target, 0.0, 0.5,
                                xtol=1e-14)
    fixed = _two_point_phase_delay(S, w) + 1.0 if S > 0 else 1.0
    # Allpass delay kept in [0.5, 1.5) where the first-order allpass is well behaved.
    N = int(np.floor(period - fixed - 0.5))
    need = period - fixed - N
    C = optimize.brentq(lambda c: _allpass_phase_delay(c, w) - need, -0.999, 0.999,
                        xtol=1e-15)
    return StringLoop(N=N, S=float(S), alpha=float(alpha), C=float(C), rho=float(rho),
                      period=float(period))


def pluck(freq: float, fs: float, duration: float, velocity: float = 0.7,
          pick_position: float = 0.2, brightness: float = 0.8, mute: bool = False,
          *, direction: str = "down", decay: float | None = None,
          seed: int | np.random.SeedSequence = 0) -> np.ndarray:
    """Render one plucked note, ``duration`` s at rate ``fs``; peak equals ``velocity``.

    ``velocity`` in (0, 1]: louder and brighter as it rises (dynamic level
    lowpass and pick brightness). ``pick_position`` is the pick's distance
    from the bridge as a fraction of the string (comb notches at multiples of
    ``freq/pick_position``). ``brightness`` in [0, 1] sets the loop damping
    filter. ``mute`` is a palm mute: darker loop, decay of about 0.15 s.
    ``direction`` 'down' or 'up' selects the pick-direction lowpass (an
    up-stroke is softer-edged). The last 5 ms fade out. Deterministic for a
    given ``seed``.
    """
    velocity = float(np.clip(velocity, 1e-3, 1.0))
    if mute:
        brightness = min(brightness, 0.15)
        decay = 0.15 if decay is None else min(decay, 0.15)
    loop = design_string(freq, fs, brightness, decay)
    n_total = max(1, int(round(duration * fs)))
    rng = np.random.default_rng(seed)

    P = int(round(loop.period))
    exc = rng.uniform(-1.0, 1.0, P)
    exc -= exc.mean()
    # Pick-direction lowpass (Jaffe & Smith): p = 0 for a down-stroke, larger
    # for an up-stroke and for softer picking.
    p = (0.0 if direction == "down" else 0.5) + 0.4 * (1.0 - velocity)
    exc = signal.lfilter([1.0 - p], [1.0, -p], exc)
    # Pick-position comb: notches at harmonics k/pick_position.
    M = int(round(np.clip(pick_position, 0.02, 0.5) * loop.period))
    comb = np.zeros(P + M)
    comb[:P] += exc
    comb[M:M + P] -= exc
    # Dynamic level lowpass: crossfade between the excitation and a one-pole
    # lowpass of it (cutoff twice the fundamental, scaled to equal RMS),
    # weighted by velocity, so soft notes are darker (after Jaffe & Smith;
    # their exact weighting is not reproduced, from memory).
    r = np.exp(-2.0 * pi * 2.0 * freq / fs)
    low = signal.lfilter([1.0 - r], [1.0, -r], comb)
    low *= np.sqrt(np.mean(comb ** 2) / max(np.mean(low ** 2), 1e-300))
    exc = velocity * comb + (1.0 - velocity) * low
    if mute:
        # The palm on the strings by the bridge also softens the attack:
        # a second one-pole lowpass on the excitation, cutoff 6 f0.
        r = np.exp(-2.0 * pi * 6.0 * freq / fs)
        exc = signal.lfilter([1.0 - r], [1.0, -r], exc)

    out = np.zeros(n_total)
    _string_loop(exc, loop.N, loop.S, loop.alpha, loop.C, loop.rho, out)
    peak = np.max(np.abs(out))
    if peak > 0:
        out *= velocity / peak
    nf = min(n_total, int(0.005 * fs))
    if nf > 1:
        out[-nf:] *= 0.5 * (1.0 + np.cos(np.linspace(0.0, pi, nf)))
    return out


# ----------------------------------------------------------------- phrases
@dataclass(frozen=True)
class Note:
    """One picked string in a phrase (times in s)."""
    time: float
    string: int          # 0 = low E .. 5 = high E
    fret: int
    velocity: float
    duration: float
    mute: bool = False
    direction: str = "down"


def _strum(t: float, frets: tuple, velocity: float, duration: float, *,
           direction: str = "down", spread: float = 0.012, mute: bool = False) -> list[Note]:
    """Notes of a strummed chord: ``frets`` low E .. high E, ``None`` = not played.

    A down-stroke reaches the strings low to high, ``spread`` s apart; an
    up-stroke high to low.
    """
    played = [(s, f) for s, f in enumerate(frets) if f is not None]
    if direction == "up":
        played.reverse()
    return [Note(t + i * spread, s, f, velocity, duration - i * spread, mute, direction)
            for i, (s, f) in enumerate(played)]


# chord shapes, low E .. high E (common practice open shapes)
_E_MAJOR = (0, 2, 2, 1, 0, 0)
_A_MAJOR = (None, 0, 2, 2, 2, 0)
_G_MAJOR = (3, 2, 0, 0, 0, 3)
_D_MAJOR = (None, None, 0, 2, 3, 2)
_E_FIFTH = (0, 2, 2, None, None, None)


def _phrase_notes() -> list[Note]:
    return [Note(0.0, 3, 2, 0.3, 0.55), Note(0.5, 4, 0, 0.3, 0.55),
            Note(1.0, 4, 1, 0.35, 0.55), Note(1.5, 5, 0, 0.35, 0.9),
            Note(2.4, 1, 2, 0.85, 0.45), Note(2.85, 2, 2, 0.85, 0.45),
            Note(3.3, 3, 2, 0.9, 1.2)]


def _phrase_chords() -> list[Note]:
    out: list[Note] = []
    for i, shape in enumerate((_E_MAJOR, _A_MAJOR, _G_MAJOR, _D_MAJOR)):
        t = 1.5 * i
        out += _strum(t, shape, 1.0, 1.0, spread=0.008)
        out += _strum(t + 1.0, shape, 0.6, 0.5, direction="up", spread=0.008)
    return out


def _phrase_mutes() -> list[Note]:
    out: list[Note] = []
    for i in range(8):
        out += _strum(0.25 * i, _E_FIFTH, 0.85, 0.22, spread=0.006, mute=True)
    out += _strum(2.0, _E_FIFTH, 0.9, 1.5, spread=0.01)
    for i in range(4):
        out.append(Note(3.5 + 0.125 * i, 0, 0, 0.8, 0.12, mute=True))
    return out


def _phrase_demo() -> list[Note]:
    out = [Note(0.0, 3, 2, 0.3, 0.5), Note(0.45, 4, 0, 0.3, 0.5),
           Note(0.9, 4, 3, 0.3, 0.6), Note(1.5, 2, 2, 0.85, 0.4),
           Note(1.9, 2, 4, 0.85, 0.4), Note(2.3, 3, 2, 0.9, 0.6)]
    out += _strum(3.0, _E_MAJOR, 0.9, 1.5, spread=0.014)
    for i in range(6):
        out += _strum(4.6 + 0.2 * i, _E_FIFTH, 0.85, 0.18, spread=0.006, mute=True)
    out.append(Note(5.9, 1, 7, 0.85, 2.3))  # E3, left to ring out
    return out


#: Phrases :func:`render_phrase` knows, with what each contains.
PHRASES: dict[str, str] = {
    "demo": "about 8 s: soft single notes, hard notes, a strummed chord, "
            "palm-muted chugs, a long note ringing out",
    "notes": "about 4.5 s of single notes, soft then hard",
    "chords": "about 6 s of strummed open chords, down- and up-strokes",
    "mutes": "about 4 s of palm-muted chugs and an open power chord",
}
_PHRASE_BUILDERS = {"demo": _phrase_demo, "notes": _phrase_notes,
                    "chords": _phrase_chords, "mutes": _phrase_mutes}


def render_notes(notes: list[Note], fs: float = 48000.0, pickup: str | Pickup = "single-coil",
                 seed: int = 0, tail: float = 0.3, stream: int = 0) -> np.ndarray:
    """Render ``notes`` to volts at the jack through ``pickup``.

    Each note gets its own random stream from ``(seed, stream, index)``; timing and
    velocity are jittered slightly (+/-2 ms, +/-5 %), so different seeds
    sound like different takes and the same seed gives the same samples.
    Strings ring in parallel; a string re-picked cuts its previous note.
    """
    p = pickup if isinstance(pickup, Pickup) else _pickup(pickup)
    fs = float(fs)
    if not fs >= 8000.0:
        raise SolderlessError(f"sample rate {fs:g} Hz is too low", part="source",
                              hint="use 44100, 48000 or 96000")
    jitter = np.random.default_rng([seed, stream, 1_000_003])
    end = max(n.time + n.duration for n in notes) + tail + 0.01
    mix = np.zeros(int(np.ceil(end * fs)))
    for i, n in enumerate(notes):
        t0 = max(0.0, n.time + jitter.uniform(-0.002, 0.002))
        vel = float(np.clip(n.velocity * jitter.uniform(0.95, 1.05), 0.01, 1.0))
        x = pluck(string_fret_hz(n.string, n.fret), fs, n.duration, velocity=vel,
                  mute=n.mute, direction=n.direction,
                  seed=np.random.SeedSequence([seed, stream, i]))
        a = int(round(t0 * fs))
        b = min(mix.size, a + x.size)
        mix[a:b] += x[:b - a]
    return apply_pickup(p.emf_peak * mix, fs, p)


def render_phrase(name: str = "demo", fs: float = 48000.0, pickup: str = "single-coil",
                  seed: int = 0) -> np.ndarray:
    """Render phrase ``name`` (see :data:`PHRASES`) in volts at the guitar's jack.

    Levels follow common practice for passive pickups (docs/references.md): single
    notes tens of mV peak, strummed chords 0.1-1 V peak.
    """
    if name not in _PHRASE_BUILDERS:
        raise SolderlessError(f"unknown phrase {name!r}", part="source",
                              hint="choose one of: " + ", ".join(PHRASES))
    # Each phrase draws from its own random streams (CRC-32 of its name).
    return render_notes(_PHRASE_BUILDERS[name](), fs, pickup, seed,
                        stream=zlib.crc32(name.encode()))


# -------------------------------------------------------------------- files
def write_wav(path, x_volts, fs: float, fs_volts: float | None = None) -> int:
    """Write ``x_volts`` as a mono float32 WAV where 1.0 (full scale) = ``fs_volts`` V
    (default: the calibration every command uses, ``solderless.engine.levels.FULL_SCALE_V``).

    Samples beyond full scale are clipped to +/-1.0 so that any reader is
    safe; the number of clipped samples is returned. The file is written to a
    temporary name beside ``path`` and then moved into place, so a failure
    never leaves a half-written file or destroys an existing one.
    """
    import soundfile as sf

    if fs_volts is None:
        from solderless.engine.levels import FULL_SCALE_V
        fs_volts = FULL_SCALE_V
    if not (fs_volts > 0.0):
        raise SolderlessError(f"full-scale voltage {fs_volts!r} must be positive",
                              part="source", hint="e.g. --fs-volts 1.0")
    x = np.asarray(x_volts, dtype=np.float64) / float(fs_volts)
    x = np.nan_to_num(x, nan=0.0, posinf=1.0, neginf=-1.0)
    clipped = int(np.count_nonzero(np.abs(x) > 1.0))
    x = np.clip(x, -1.0, 1.0).astype(np.float32)
    from solderless.engine.fileio import atomic_write
    atomic_write(path, lambda tmp: sf.write(tmp, x, int(round(fs)), subtype="FLOAT",
                                            format="WAV"), suffix=".wav")
    return clipped

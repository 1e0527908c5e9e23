"""Limits on what an input may ask of Solderless.

Each bounds the time or memory one file or option can demand, far above
what a guitar-effect circuit needs, and each refusal is a one-line error
that names the limit.  The numbers are our own choices (common practice for
a desktop tool: no single input should need more than about a gigabyte or
a minute before it is refused).
"""
from __future__ import annotations

#: Netlist, model library and design files (bytes); see solderless.engine.fileio.
from solderless.engine.fileio import MAX_AUDIO_BYTES, MAX_TEXT_BYTES  # noqa: F401

#: Nested .include / .lib files.
MAX_INCLUDE_DEPTH = 20
#: Nested subcircuit instances (X inside a .subckt inside ...).
MAX_SUBCKT_DEPTH = 40
#: Elements of one flat circuit.  The solver's network matrices are dense:
#: 2000 elements make matrices of a few thousand rows (tens of MB each);
#: the largest built-in design has under 100.
MAX_ELEMENTS = 2000
#: Cards processed while expanding subcircuits (instances included), so an
#: expansion that makes few elements but many calls is bounded too.
MAX_EXPANDED_CARDS = 200_000
#: One parameter expression: characters, nesting depth, evaluation steps
#: (function calls included: a chain of .func that each call the previous
#: one twice doubles the work per level).
MAX_EXPR_CHARS = 4000
MAX_EXPR_DEPTH = 100
MAX_EXPR_STEPS = 200_000
#: Offline simulation sample rate (Hz): telephone-band 8 kHz to 384 kHz.
MIN_RATE = 8000.0
MAX_RATE = 384000.0
#: Points of an AC sweep.
MAX_AC_POINTS = 100_000
#: Length of audio generated or rendered from nothing (seconds).
MAX_SECONDS = 3600.0
#: Samples of one offline render (about 17 minutes at 48 kHz; each sample
#: costs a few arrays of 8 bytes).
MAX_RENDER_SAMPLES = 50_000_000
#: One netlist card, continuation lines included (characters).
MAX_CARD_CHARS = 100_000

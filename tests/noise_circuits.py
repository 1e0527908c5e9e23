"""Netlists of our own (typical values) shared by the noise analysis checks
(tests/test_noise.py) and the live noise checks (tests/test_live_noise.py).
Without ``.end``: a test adds it, or further cards first."""

DIVIDER = """divider for the noise checks (our own values)
VIN in 0 DC 0 AC 1
R1 in out 10k
R2 out 0 10k
"""

# a common-emitter stage with a 600 ohm source, base, emitter and collector
# resistances and flicker noise on the card (our own typical values)
CE_STAGE = """common-emitter stage for the noise checks
VCC vcc 0 9
VIN src 0 DC 0 AC 1
RS src in 600
CIN in b 10u
RB1 vcc b 100k
RB2 b 0 22k
RC vcc c 4.7k
RE e 0 1k
CE e 0 100u
Q1 c b e QN
COUT c out 10u
RL out 0 100k
.model QN NPN(IS=1e-14 BF=200 VAF=80 RB=100 RE=1 RC=10 KF=2e-15 AF=1)
"""

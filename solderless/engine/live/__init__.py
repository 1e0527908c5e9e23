"""Live playing: a design (or an A/B pair) on a sound card stream.

Modules, one responsibility each:

* ``host``      :class:`~solderless.engine.live.host.LiveHost`, the object a front end drives
* ``remote``    :class:`~solderless.engine.live.remote.HostProcess`, the host in its own process
                (commands through a pipe, meters and scope through shared memory)
* ``stream``    sounddevice/PortAudio, imported lazily
* ``source``    live input, WAV loop, synthetic instrument, test tone
* ``limiter``   output stage: A/B crossfade, level ramp, guard, safety limiter
* ``meters``    per-block frames in, ballistic readings out
* ``ring``      lock-free single-writer frame ring (private or in shared memory)
* ``loudness``  ITU-R BS.1770-4 K-weighting and loudness

Nothing here imports sounddevice at import time.
"""

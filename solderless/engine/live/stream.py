"""Sound card access through sounddevice/PortAudio, imported lazily so that
every offline command works on a machine without the PortAudio library.

Audio thread: the closure made in :func:`open_stream` is PortAudio's callback;
it only calls :meth:`solderless.engine.live.host.LiveHost._audio_block`. Everything else
here runs on the caller's thread.
"""
from __future__ import annotations

from solderless.engine.errors import AudioError

INSTALL_HINT = "install the PortAudio library: sudo apt-get install libportaudio2"


def load_sounddevice():
    """Import and return the ``sounddevice`` module, or raise AudioError with
    the install line if the module or the PortAudio library is missing."""
    try:
        import sounddevice
    except OSError as exc:   # sounddevice raises OSError when libportaudio is absent
        raise AudioError(f"the PortAudio library was not found ({exc})",
                         hint=INSTALL_HINT) from None
    except ImportError:
        raise AudioError("the Python package 'sounddevice' is not installed",
                         hint="pip install sounddevice; " + INSTALL_HINT) from None
    return sounddevice


def list_devices() -> list[dict]:
    """Devices PortAudio sees: index, name, host API, input/output channel
    counts, default sample rate, and whether it is the default in/out."""
    sd = load_sounddevice()
    try:
        devs = sd.query_devices()
        apis = sd.query_hostapis()
        d_in, d_out = sd.default.device
    except sd.PortAudioError as exc:
        raise AudioError(f"PortAudio could not list the devices: {exc}") from None
    out = []
    for i, d in enumerate(devs):
        out.append({
            "index": i, "name": d["name"],
            "host_api": apis[d["hostapi"]]["name"],
            "inputs": d["max_input_channels"], "outputs": d["max_output_channels"],
            "default_samplerate": d["default_samplerate"],
            "default_input": i == d_in, "default_output": i == d_out,
        })
    return out


def _device_arg(dev):
    """A device given as text: an index if it is all digits, else a name part."""
    if dev is None:
        return None
    if isinstance(dev, str) and dev.strip().isdigit():
        return int(dev)
    return dev


def open_stream(host, *, input_device=None, output_device=None, channels_out: int = 2,
                channels_in: int | None = None):
    """Open and start the stream that drives ``host`` (a LiveHost).

    Duplex when the host's source needs the live input, output-only
    otherwise. Block size and rate are fixed to the host's. Raises AudioError
    naming the device and the fix when PortAudio refuses.
    """
    sd = load_sounddevice()
    needs_in = bool(getattr(host.source, "needs_input", False))
    ind, outd = _device_arg(input_device), _device_arg(output_device)
    try:   # a mono output device gets one channel, a stereo one two
        info = sd.query_devices(outd, "output")
        channels_out = max(1, min(channels_out, int(info["max_output_channels"])))
    except (sd.PortAudioError, ValueError) as exc:
        raise AudioError(f"no output device '{output_device or 'default'}': {exc}",
                         hint="see 'solderless devices' for what is there") from None

    if needs_in:
        ch_in = channels_in or (host.source.channel + 1)
        try:
            have = int(sd.query_devices(ind, "input")["max_input_channels"])
        except (sd.PortAudioError, ValueError) as exc:
            raise AudioError(f"no input device '{input_device or 'default'}': {exc}",
                             hint="see 'solderless devices', or use --source synth") from None
        if ch_in > have:
            raise AudioError(f"input channel {host.source.channel + 1} does not exist on "
                             f"the input device ({have} channels)",
                             hint=f"use --input-channel 1 to {have}")

        def callback(indata, outdata, frames, time_info, status):
            host._audio_block(indata, outdata, frames, bool(status))
        kw = dict(device=(ind, outd), channels=(ch_in, channels_out))
        cls = sd.Stream
    else:
        def callback(outdata, frames, time_info, status):
            host._audio_block(None, outdata, frames, bool(status))
        kw = dict(device=outd, channels=channels_out)
        cls = sd.OutputStream
    try:
        stream = cls(samplerate=host.fs, blocksize=host.block, dtype="float32",
                     latency="low", callback=callback, **kw)
        stream.start()
    except (sd.PortAudioError, ValueError) as exc:
        which = f"input '{input_device}', output '{output_device}'" if needs_in else \
            f"output '{output_device}'"
        raise AudioError(f"could not open the audio stream ({which}): {exc}",
                         hint="check 'solderless devices', the sample rate and the "
                              "channel count; try --block 256") from None
    lat = stream.latency
    host.stream_latency_s = (float(lat[0]), float(lat[1])) if isinstance(lat, (tuple, list)) \
        else (0.0, float(lat))
    return stream

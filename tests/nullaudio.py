"""A child process's environment whose PortAudio plays into ALSA's null
device (a temporary HOME with an ``.asoundrc``; see DESIGN.md's note on
testing live audio without a sound card), with this checkout importable."""
import os
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
ASOUNDRC = "pcm.!default {\n    type null\n}\n"


def null_audio_env(tmp_path: Path) -> dict:
    """os.environ for a child process: HOME under tmp_path with an
    .asoundrc routing the default PCM to the null device, the config folder
    inside it, PYTHONPATH at the repository root, AUDIODEV unset."""
    home = tmp_path / "home"
    home.mkdir(exist_ok=True)
    (home / ".asoundrc").write_text(ASOUNDRC)
    env = dict(os.environ, HOME=str(home), XDG_CONFIG_HOME=str(home / ".config"),
               PYTHONPATH=str(ROOT))
    env.pop("AUDIODEV", None)
    return env

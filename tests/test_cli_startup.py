"""Start-up of one command: the parser imports only the module of the
command asked for, every command's options are still there, and the
thermal voltage's constants are the SI's exact ones.  (Speed itself is
measured in bench/bench_startup.py, not here.)"""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from solderless.app import cli

ROOT = Path(__file__).resolve().parents[1]

# the modules each optional command's options live in (solderless/app/cli.py _OPTIONAL)
OPTIONAL = {name: module for name, module, *_ in cli._OPTIONAL}


def _modules_after(code: str) -> set[str]:
    """Modules loaded in a fresh interpreter after running ``code``."""
    env = dict(os.environ, PYTHONPATH=str(ROOT), QT_QPA_PLATFORM="offscreen")
    out = subprocess.run([sys.executable, "-c", code + "\nimport sys, json\n"
                          "print(json.dumps(sorted(sys.modules)))"],
                         capture_output=True, text=True, env=env, check=True)
    return set(json.loads(out.stdout.strip().splitlines()[-1]))


def test_render_parser_imports_no_other_command():
    # common practice (PEP 8 allows function-level imports): a command pays
    # only for its own imports
    mods = _modules_after("from solderless.app.cli import build_parser\n"
                          "build_parser(['render', 'a.cir', 'in.wav', 'out.wav'])")
    for module in set(OPTIONAL.values()):
        assert module not in mods, module
    for heavy in ("PyQt6", "scipy.signal", "scipy.optimize", "solderless.engine.solver"):
        assert heavy not in mods, heavy


def test_named_command_gets_its_own_options():
    for name, module in OPTIONAL.items():
        try:
            __import__(module)
        except ImportError:          # e.g. no Qt on this machine
            continue
        ap = cli.build_parser([name, "--help"])
        sub = next(a for a in ap._actions if a.dest == "command")
        opts = {s for a in sub.choices[name]._actions for s in a.option_strings}
        full = cli.build_parser()
        sub_full = next(a for a in full._actions if a.dest == "command")
        want = {s for a in sub_full.choices[name]._actions for s in a.option_strings}
        assert opts == want, name


def test_lazy_and_full_parsers_read_the_same_arguments():
    argv = ["ac", "flagship", "--fmin", "20", "--fmax", "2e4", "--points", "50"]
    a, b = cli.build_parser(argv).parse_args(argv), cli.build_parser().parse_args(argv)
    assert vars(a) == vars(b)


def test_top_level_help_lists_every_command(capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main(["--help"])
    assert exc.value.code == 0
    text = capsys.readouterr().out
    for name in list(OPTIONAL) + ["render", "op", "ac", "designs"]:
        assert name in text, name


def test_thermal_voltage_constants_are_the_si_exact_values():
    # BIPM, The International System of Units, 9th ed. (2019): k and e exact
    # (docs/references.md, "Physical constants"); scipy.constants agrees
    from scipy import constants
    from solderless.engine.devices import _common
    assert _common.K_BOLTZMANN == constants.k == 1.380649e-23
    assert _common.Q_ELEMENTARY == constants.e == 1.602176634e-19
    assert _common.VT == constants.k * _common.TNOM / constants.e

"""The stage library and the built-in designs (under solderless/presets)."""
from __future__ import annotations

import difflib
from pathlib import Path

from solderless.engine.circuit import Where
from solderless.engine.design.model import PRESETS, Stage, _expect
from solderless.engine.design.reading import _line_finder, _read_stage_body, _toml_load
from solderless.engine.errors import DesignError

STAGE_LIBRARY = PRESETS / "stages"
DESIGN_LIBRARY = PRESETS / "designs"


def stage_library() -> dict[str, Path]:
    """Names (``group/name``) and files of the stage templates under solderless/presets/stages."""
    out = {}
    if STAGE_LIBRARY.is_dir():
        for f in sorted(STAGE_LIBRARY.rglob("*.toml")):
            out[f.relative_to(STAGE_LIBRARY).with_suffix("").as_posix()] = f
    return out


def builtin_designs() -> dict[str, Path]:
    """Names and files of the built-in designs under solderless/presets/designs."""
    if not DESIGN_LIBRARY.is_dir():
        return {}
    return {f.stem: f for f in sorted(DESIGN_LIBRARY.glob("*.toml"))}



def load_stage_template(name: str, where: Where | None = None) -> Stage:
    """Load a stage template from the stage library by ``group/name``."""
    lib = stage_library()
    where = where or Where()
    if name not in lib:
        close = difflib.get_close_matches(name, lib, n=3)
        raise DesignError(f"no stage template '{name}' in solderless/presets/stages",
                          file=where.file, line=where.line,
                          hint=("did you mean " + ", ".join(close) + "?") if close else
                          "see `solderless designs` for the stage library")
    path = lib[name]
    data, text = _toml_load(path)
    body = data.get("stage")
    _expect(isinstance(body, dict), "a stage template needs a [stage] table",
            Where(str(path), 1))
    return _read_stage_body(body, name.split("/")[-1], Where(str(path), 1),
                            _line_finder(text))



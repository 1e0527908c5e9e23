"""Designs: what the user edits, shared by the workbench, the console and
the live host.

* :mod:`.model` — the tables of part types, :class:`Part`, :class:`Stage`,
  :class:`Link`, :class:`Probe`, :class:`Design` and its one-change methods.
* :mod:`.document` — the user's TOML document kept in step with every edit
  (comments and layout kept; saving renames atomically).
* :mod:`.edits` — edits as data: small frozen dataclasses that apply
  completely or not at all and return their inverse (undo).
* :mod:`.reading` — design files and :func:`load_design`.
* :mod:`.library` — the stage library and the built-in designs.
* :mod:`.flatten` — :func:`flatten` (design to flat circuit) and
  :func:`validate_circuit`.
* :mod:`.netlist` — designs made from SPICE netlists, netlists as stages.
* :mod:`.differences` — what differs between two designs.

The file format is described in ``docs/design-format.md``. Every public name
is re-exported here: ``from solderless.engine.design import load_design``.
"""
from __future__ import annotations

from solderless.engine.design.model import (  # noqa: F401
    AUDIO_TAPER_BASE, DEVICE_TYPES, JACK, KIND_TO_TYPE, MODEL_KIND, NETLIST_STAGE,
    PART_TYPES, POSITIVE_TYPES, POT_END_FRACTION, POT_END_MIN, PRESETS, REST_SOURCE, TAPERS,
    VALUE_TYPES, _FIXED_PART_TYPES, Design, Link, Part, PartInfo, Probe, Stage, _check_taper,
    _cut, _expect, _optional_nodes, _registry,
    _format_value, _parse_value, _parts_library, _table, _tables, _temperature,
    atomic_write_text, file_mode_for, models_of_kind, taper_fraction)
from solderless.engine.design.reading import (  # noqa: F401
    _design_from_toml, _line_finder, _read_link_end, _read_part, _read_stage_body,
    _template_part, _toml_load, load_design)
from solderless.engine.design.library import (  # noqa: F401
    DESIGN_LIBRARY, STAGE_LIBRARY, builtin_designs, load_stage_template, stage_library)
from solderless.engine.design.flatten import (  # noqa: F401
    _Flattener, _UnionFind, flatten, validate_circuit)
from solderless.engine.design.netlist import (  # noqa: F401
    _design_from_netlist, _design_from_netlist_toml, _part_type, _stage_from_netlist,
    flatten_netlist)
from solderless.engine.design.differences import (  # noqa: F401
    Difference, change_lines, differences, same_structure, taper_text)
from solderless.engine.design import document, edits  # noqa: F401,E402
from solderless.engine.design.edits import Applied, Edit, apply_edit  # noqa: F401,E402

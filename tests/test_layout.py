"""The package layout DEVELOPERS.md describes: the engine imports no front
end (neither solderless.app nor solderless.gui, nor Qt), and the workbench
does not import the command-line front end. Every import statement counts,
also those inside functions (read with the standard library's ast)."""
import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parent.parent / "solderless"


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            out.add(node.module)
    return out


def _offenders(folder: str, banned: tuple[str, ...]) -> list[str]:
    bad = []
    for p in sorted((PKG / folder).rglob("*.py")):
        for mod in _imports(p):
            if any(mod == b or mod.startswith(b + ".") for b in banned):
                bad.append(f"{p.relative_to(PKG.parent)}: {mod}")
    return bad


def test_the_engine_imports_no_front_end():
    assert _offenders("engine", ("solderless.app", "solderless.gui", "PyQt6",
                                 "pyqtgraph")) == []


def test_the_workbench_does_not_import_the_command_line():
    assert _offenders("gui", ("solderless.app",)) == []


@pytest.mark.parametrize("banned", ["solderless.gui", "PyQt6"])
def test_the_check_sees_imports_inside_functions(tmp_path, banned):
    p = tmp_path / "m.py"
    p.write_text(f"def f():\n    from {banned} import x\n")
    assert banned in _imports(p)

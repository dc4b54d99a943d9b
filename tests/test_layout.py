"""Layout rules of the package (docs/architecture.md, "Direction of imports").

Common practice, no source: modules stay small enough to read (600 lines), and
the lower layers (readers and writers in ``tem/io``, the forward kernels in
``tem/forward``) never import the stage folders, the pipeline or the command
line above them, so a kernel can be used and tested on its own.
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "tem"
UPPER = ("stack", "gate", "rhoa", "invert", "section", "export", "report", "importer",
         "pipeline", "cli", "synth", "qc")
LOWER = ("io", "forward")


def _modules():
    return sorted(p for p in PKG.rglob("*.py"))


def _imported(path: Path, root: Path = PKG.parent):
    """Top-level tem sub-packages a module imports (absolute or relative)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    parts = path.relative_to(root).with_suffix("").parts            # ("tem", "io", "raw")
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = list(parts[:-node.level]) if node.level <= len(parts) else []
                mod = base + (node.module.split(".") if node.module else [])
                names = [mod + [a.name] for a in node.names] if not node.module else [mod]
            else:
                names = [(node.module or "").split(".")]
            for n in names:
                if len(n) >= 2 and n[0] == "tem":
                    yield n[1], node.lineno
        elif isinstance(node, ast.Import):
            for a in node.names:
                n = a.name.split(".")
                if len(n) >= 2 and n[0] == "tem":
                    yield n[1], node.lineno


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PKG)))
def test_module_is_under_600_lines(path):
    assert len(path.read_text(encoding="utf-8").splitlines()) <= 600


def test_lower_layers_never_import_stage_code():
    bad = []
    for path in _modules():
        layer = path.relative_to(PKG).parts[0]
        if layer not in LOWER:
            continue
        for sub, line in _imported(path):
            if sub in UPPER:
                bad.append(f"{path.relative_to(PKG)}:{line} imports tem.{sub}")
    assert not bad, bad


def test_the_checker_sees_upward_imports(tmp_path):
    """The rule above can fail: relative and absolute imports upwards are found."""
    fake = tmp_path / "tem" / "io" / "bad.py"
    fake.parent.mkdir(parents=True)
    fake.write_text("from ..invert.station import x\nfrom . import atomic\nimport tem.cli.run\n"
                    "from tem.errors import TemInputError\n")
    found = [sub for sub, _ in _imported(fake, tmp_path)]
    assert found == ["invert", "io", "cli", "errors"]

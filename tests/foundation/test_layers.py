"""The layering rules of DEVELOPERS.md, checked on the source itself.

* Nothing below ``registry/services/`` imports it (rules and storage never
  depend on user actions).
* The CLI and the UI never import the storage tables: services hand them plain results.
* No model-state name is written as a bare string outside an enum definition:
  code names ``ModelState`` members, so the enum is the one place a state is spelled.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from registry.lifecycle.states import ModelState

ROOT = Path(__file__).resolve().parents[2]
BELOW_SERVICES = ["storage", "spectra", "chemometrics", "selection", "lifecycle", "lineage"]


def _modules(*dirs: str) -> list[Path]:
    return sorted(p for d in dirs for p in (ROOT / d).rglob("*.py"))


def _imported(path: Path, root: Path = ROOT) -> set[str]:
    """Every module name ``path`` imports, relative imports resolved (function-level ones too)."""
    package = list(path.relative_to(root).parts[:-1])
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[:len(package) - node.level + 1]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module or ""
            names.add(module)
            names.update(f"{module}.{alias.name}" for alias in node.names)
    return names


def test_the_import_scan_resolves_relative_imports(tmp_path):
    module = tmp_path / "registry" / "lineage" / "sample.py"
    module.parent.mkdir(parents=True)
    module.write_text("def f():\n    from ..services.due import x\n    from . import audit_chain\n",
                      encoding="utf-8")
    assert _imported(module, tmp_path) >= {"registry.services.due", "registry.lineage.audit_chain"}


@pytest.mark.parametrize("layer", BELOW_SERVICES)
def test_nothing_below_services_imports_services(layer):
    offenders = [f"{p.relative_to(ROOT)} imports {name}" for p in _modules(f"registry/{layer}")
                 for name in sorted(_imported(p))
                 if name == "registry.services" or name.startswith("registry.services.")]
    assert offenders == []


def test_cli_and_ui_do_not_import_storage_tables():
    offenders = [f"{p.relative_to(ROOT)} imports {name}"
                 for p in _modules("registry/commands", "ui") + [ROOT / "registry" / "cli.py"]
                 for name in sorted(_imported(p)) if name.startswith("registry.storage.models")]
    assert offenders == []


def _state_literals(path: Path, root: Path = ROOT) -> list[str]:
    """String constants equal to a model-state name, except enum member definitions and
    dictionary keys or subscripts (field names such as an instrument's ``"active"`` flag)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    skip: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ClassDef) and any(
                isinstance(b, ast.Name) and b.id.endswith("Enum") for b in node.bases):
            skip.update(id(n) for n in ast.walk(node))
        elif isinstance(node, ast.Dict):
            skip.update(id(k) for k in node.keys if k is not None)
            # column-name lists keyed by their table class ({User: ("id", "active", ...)})
            skip.update(id(e) for k, v in zip(node.keys, node.values)
                        if isinstance(k, ast.Name) and isinstance(v, ast.Tuple) for e in v.elts)
        elif isinstance(node, ast.Subscript):
            skip.add(id(node.slice))
    states = {s.value for s in ModelState}
    return [f"{path.relative_to(root)}:{node.lineno}: {node.value!r}"
            for node in ast.walk(tree)
            if isinstance(node, ast.Constant) and isinstance(node.value, str)
            and node.value in states and id(node) not in skip]


def test_the_literal_scan_finds_a_bare_state(tmp_path):
    sample = tmp_path / "sample.py"
    sample.write_text('class S(StrEnum):\n    A = "active"\n\n'
                      'row = {"active": True}\nflag = row["active"]\nCOLUMNS = {User: ("id", "active")}\n'
                      'if state == "approved":\n    pass\n', encoding="utf-8")
    assert _state_literals(sample, tmp_path) == ["sample.py:7: 'approved'"]


def test_no_raw_model_state_outside_the_enums():
    found = [hit for p in _modules("registry", "ui") for hit in _state_literals(p)]
    assert found == []

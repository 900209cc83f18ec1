"""The import graph runs one way: each stage imports only stages below it.

Layers (DEVELOPERS.md, "Architecture"): the foundation (errors, guarded file
reading, the batch executor, the package's own version), then structures, then the three stages that
work on structures or files (reactions, prediction, spectra), then identification,
then reports, then the store, then the faces (command line, demo generator).
A stage may import its own modules freely. Imports inside functions count, and so
do ``import_module("specmatch....")`` calls with a literal name.
"""

from __future__ import annotations

import ast
from pathlib import Path

import specmatch

PACKAGE = Path(specmatch.__file__).parent

#: stage -> layer; a module may import stages of a lower or equal layer only
LAYERS = {
    "(top)": 0, "errors": 0, "safeio": 0, "executor": 0,
    "structures": 1,
    "reactions": 2, "prediction": 2, "spectra": 2,
    "identification": 3,
    "reports": 4,
    "store": 5,
    "cli": 6, "demo": 6, "__main__": 7,
}


def _stage(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "(top)"


def _imports(path: Path, module: str) -> set[str]:
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            found.add(target)
        elif isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif (isinstance(node, ast.Call) and getattr(node.func, "id", getattr(node.func, "attr", "")) == "import_module"
              and node.args and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str)):
            found.add(node.args[0].value)
    return {t for t in found if t == "specmatch" or t.startswith("specmatch.")}


def _graph() -> dict[str, set[str]]:
    graph: dict[str, set[str]] = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE.parent).with_suffix("")
        module = ".".join(rel.parts).removesuffix(".__init__")
        graph[module] = _imports(path, module)
    return graph


def test_every_stage_has_a_layer():
    stages = {_stage(m) for m in _graph()}
    assert stages <= set(LAYERS), f"add these stages to LAYERS (and DEVELOPERS.md): {stages - set(LAYERS)}"


def test_imports_run_one_way():
    upward = []
    for module, targets in _graph().items():
        here = LAYERS[_stage(module)]
        for target in targets:
            there = LAYERS.get(_stage(target), 99)
            if _stage(target) != _stage(module) and there > here:
                upward.append(f"{module} imports {target}")
    assert not upward, "imports against the layer order:\n" + "\n".join(sorted(upward))


def test_the_check_sees_lazy_imports(tmp_path):
    # the checker itself must see imports inside functions and import_module calls
    src = tmp_path / "mod.py"
    src.write_text("def f():\n    from ..reports import html\n    import_module('specmatch.store')\n")
    assert _imports(src, "specmatch.identification.mod") == {"specmatch.reports", "specmatch.store"}


def test_library_never_imports_streamlit():
    offenders = [str(p.relative_to(PACKAGE)) for p in PACKAGE.rglob("*.py")
                 if any(isinstance(n, (ast.Import, ast.ImportFrom)) and "streamlit" in (
                     getattr(n, "module", None) or " ".join(a.name for a in n.names))
                        for n in ast.walk(ast.parse(p.read_text(encoding="utf-8"))))]
    assert not offenders, offenders


def _calls(name: str) -> list[str]:
    """Every place in the package (and app.py) that calls `<anything>.name(...)` or `name(...)`."""
    out = []
    for path in sorted(PACKAGE.rglob("*.py")) + [PACKAGE.parent / "app.py"]:
        for n in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(n, ast.Call):
                f = n.func
                called = f.attr if isinstance(f, ast.Attribute) else getattr(f, "id", None)
                if called == name:
                    out.append(f"{path.relative_to(PACKAGE.parent)}:{n.lineno}")
    return out


def test_canonical_smiles_are_written_in_one_place():
    # structures.mol_smiles is the one writer (isomeric or constitution); a second
    # writer could disagree on flags and split one structure into two keys
    assert [p.split(":")[0] for p in _calls("MolToSmiles")] == ["specmatch/structures/molecule.py"]


def test_own_types_are_not_probed():
    # hasattr/getattr on our own contracts hides renames; isinstance or the type itself says it
    probes = [p for p in _calls("hasattr") + _calls("getattr")
              if p.startswith(("specmatch/reports/", "specmatch/reactions/"))]
    probes += [p for p in _calls("hasattr") if p.startswith("app.py")]
    assert not probes, probes

"""The package's layering, read from the source with ``ast`` (nothing is imported or run).

Every module imports only from its own layer and the layers before it (``LAYERS``, the order the
pipeline runs in); no two modules import each other, directly or round a longer circle; no module
takes an underscore name (or an underscore module) from another subpackage; and no module loads
user files with pickle, ``eval``/``exec`` or another code-running format.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "slipnet"

#: The pipeline order: a module may import from its own layer and the ones before it.
#: "" is the base (errors, cautions, shared checks, the input guard, file writing, progress, column names).
LAYERS: tuple[str, ...] = (
    "", "crystal", "maps", "io", "synthetic", "grains", "stress", "slip", "forecast", "growth",
    "notch", "compare", "validation", "figures", "reports", "study", "demo", "cli",
)
#: Private modules of the base layer that every step may use (their public names only).
SHARED_PRIVATE = {"slipnet._checks", "slipnet._files", "slipnet._inputs", "slipnet._progress"}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(ROOT.rglob("*.py"))}


MODULES = _modules()


def _is_package(mod: str) -> bool:
    return MODULES.get(mod, Path()).name == "__init__.py"


def _resolve(mod: str, level: int, current: str) -> str:
    if level == 0:
        return mod
    base = current.split(".")
    if not _is_package(current):
        base = base[:-1]
    base = base[: len(base) - (level - 1)]
    return ".".join(base + ([mod] if mod else []))


def _imports(mod: str) -> list[tuple[str, list[str], int]]:
    """``(target module, imported names, line)`` for every slipnet import in ``mod``, lazy ones included."""
    tree = ast.parse(MODULES[mod].read_text(encoding="utf-8"))
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, [], node.lineno) for a in node.names if a.name.split(".")[0] == "slipnet"]
        elif isinstance(node, ast.ImportFrom):
            target = _resolve(node.module or "", node.level, mod)
            if target.split(".")[0] != "slipnet":
                continue
            plain = []
            for a in node.names:
                sub = f"{target}.{a.name}"
                if sub in MODULES:  # ``from pkg import submodule``
                    out.append((sub, [], node.lineno))
                else:
                    plain.append(a.name)
            if plain:
                out.append((target, plain, node.lineno))
    return out


def _layer(mod: str) -> str:
    parts = mod.split(".")
    if len(parts) == 1:
        return ""
    top = parts[1]
    return top if top in LAYERS else ""


def _subpackage(mod: str) -> str:
    parts = mod.split(".")
    return parts[1] if len(parts) > 1 and _is_package(".".join(parts[:2])) else ""


def test_every_module_belongs_to_a_layer():
    unknown = sorted(m for m in MODULES if m.count(".") >= 1 and m.split(".")[1] not in LAYERS
                     and _is_package(".".join(m.split(".")[:2])))
    assert not unknown, f"subpackages missing from LAYERS: {unknown}"


def test_imports_run_down_the_layers():
    rank = {name: i for i, name in enumerate(LAYERS)}
    bad = []
    for mod in MODULES:
        for target, _, line in _imports(mod):
            if target not in MODULES:
                bad.append(f"{mod}:{line} imports {target}, which does not exist")
            elif rank[_layer(target)] > rank[_layer(mod)]:
                bad.append(f"{mod}:{line} imports {target} from the later layer {_layer(target)!r}")
    assert not bad, "imports that run back up the layer order:\n" + "\n".join(bad)


def test_figures_only_imported_by_reports():
    bad = [f"{mod}:{line} imports {target}" for mod in MODULES for target, _, line in _imports(mod)
           if _layer(target) == "figures" and _layer(mod) not in ("figures", "reports")]
    assert not bad, "figures are drawn only through slipnet.reports:\n" + "\n".join(bad)


def test_no_import_circles():
    graph = {mod: sorted({t for t, _, _ in _imports(mod) if t in MODULES and t != mod}) for mod in MODULES}
    state: dict[str, int] = {}
    stack: list[str] = []
    circles = []

    def visit(m: str) -> None:
        state[m] = 1
        stack.append(m)
        for t in graph[m]:
            if state.get(t) == 1:
                circles.append([*stack[stack.index(t):], t])
            elif t not in state:
                visit(t)
        stack.pop()
        state[m] = 2

    for m in graph:
        if m not in state:
            visit(m)
    assert not circles, "import circles:\n" + "\n".join(" -> ".join(c) for c in circles)


def test_no_underscore_names_across_subpackages():
    bad = []
    for mod in MODULES:
        own = _subpackage(mod)
        for target, names, line in _imports(mod):
            if _subpackage(target) == own and own:
                continue
            if target == mod:
                continue
            private_module = any(p.startswith("_") and not p.startswith("__") for p in target.split(".")[1:])
            if private_module and target not in SHARED_PRIVATE and _subpackage(target) != own:
                bad.append(f"{mod}:{line} imports the private module {target}")
            bad += [f"{mod}:{line} imports the private name {n} from {target}" for n in names
                    if n.startswith("_") and not (n.startswith("__") and n.endswith("__"))]
    assert not bad, "underscore names taken from another subpackage:\n" + "\n".join(bad)


#: Ways of reading a file that can run code from it.
_UNSAFE = re.compile(r"\b(import pickle|from pickle|pickle\.load|cPickle|dill|joblib\.load|shelve|marshal\.load"
                     r"|allow_pickle\s*=\s*True|yaml\.load\(|(?<![.\w])eval\(|(?<![.\w])exec\()")


@pytest.mark.parametrize("mod", sorted(MODULES))
def test_no_code_running_file_formats(mod):
    text = MODULES[mod].read_text(encoding="utf-8")
    hits = [f"line {text[:m.start()].count(chr(10)) + 1}: {m.group(0)}" for m in _UNSAFE.finditer(text)]
    assert not hits, f"{mod} reads files in a way that can run code: {hits}"

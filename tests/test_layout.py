"""The package's layering, read from the source: the import rules of DESIGN.md as tests.

- the method (``directional/method/``) imports nothing from the running, entry-point, report and
  interface layers, nor anything that does I/O; and each layer imports nothing from the layers
  above it (method < run < api < report < interface);
- no module imports another module's underscore names;
- no import cycle between the package's modules;
- at most ten modules at the package's top level.

The module graph is built from the syntax tree of every module under ``directional/``: every
``import`` and ``from ... import`` counts, at module level or inside a function (a deferred import
is still a dependency).  An import of ``directional.a.b`` is an edge to the module ``a/b.py`` only:
that Python runs the packages' ``__init__`` on the way is left out, or every module would be in a
cycle with the package's own ``__init__``, which re-exports the public names.
"""

from __future__ import annotations

import ast
import sys
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path

import pytest

import directional

PACKAGE = Path(directional.__file__).resolve().parent
LAYERS = ("method", "run", "api", "report", "interface")  # lowest first
IO_MODULES = {
    "sqlite3", "concurrent", "multiprocessing", "subprocess", "threading", "signal", "socket",
    "time", "os", "io", "pathlib", "shutil", "tempfile", "tqdm", "matplotlib",
}


@dataclass
class Module:
    """One module's imports, read from its syntax tree."""

    name: str
    path: Path
    imports: set[str] = field(default_factory=set)  # directional modules it imports
    external: set[str] = field(default_factory=set)  # top-level names of other packages
    private: list[str] = field(default_factory=list)  # "module._name" it takes from another


def _name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


@cache
def modules() -> dict[str, Module]:
    """Every module under directional/, with its imports."""
    found = {_name(path): Module(_name(path), path) for path in sorted(PACKAGE.rglob("*.py"))}
    for module in found.values():
        _read(module, found)
    return found


def _private(name: str) -> bool:
    return name.startswith("_") and not (name.startswith("__") and name.endswith("__"))


def _read(module: Module, found: dict[str, Module]) -> None:
    tree = ast.parse(module.path.read_text(encoding="utf-8"), str(module.path))
    package = module.name if module.path.name == "__init__.py" else module.name.rpartition(".")[0]
    aliases: dict[str, str] = {}  # local name -> directional module it stands for
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] != "directional":
                    module.external.add(alias.name.split(".")[0])
                    continue
                module.imports.add(alias.name)
                if alias.asname:
                    aliases[alias.asname] = alias.name
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                head = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join(head + ([base] if base else []))
            if base.split(".")[0] != "directional":
                module.external.add(base.split(".")[0])
                continue
            for alias in node.names:
                full = f"{base}.{alias.name}"
                if full in found:  # a module: ``from directional.method import space``
                    module.imports.add(full)
                    aliases[alias.asname or alias.name] = full
                else:  # a name defined in the module ``base``
                    module.imports.add(base)
                    if _private(alias.name):
                        module.private.append(f"{base}.{alias.name}")
    for node in ast.walk(tree):  # ``space._helper`` through a module imported above
        if (
            isinstance(node, ast.Attribute)
            and isinstance(node.value, ast.Name)
            and node.value.id in aliases
            and _private(node.attr)
            and aliases[node.value.id] != module.name
        ):
            module.private.append(f"{aliases[node.value.id]}.{node.attr}")
    module.imports = {name for name in module.imports if name in found and name != module.name}


def layer(name: str) -> str | None:
    """The layer a module belongs to (a key of LAYERS), or None outside the layers."""
    parts = name.split(".")
    return parts[1] if len(parts) > 2 and parts[1] in LAYERS else None


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components of more than one module (Tarjan 1972), iteratively."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []
    for root in sorted(graph):
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = len(index)
        stack.append(root)
        on_stack.add(root)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is not None:
                if child not in index:
                    index[child] = low[child] = len(index)
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(graph[child]))))
                elif child in on_stack:
                    low[node] = min(low[node], index[child])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                component = []
                while True:
                    member = stack.pop()
                    on_stack.discard(member)
                    component.append(member)
                    if member == node:
                        break
                if len(component) > 1 or node in graph[node]:
                    found.append(sorted(component))
    return found


# ----------------------------------------------------------------------------- the reader itself


def test_the_reader_sees_deferred_relative_and_attribute_imports(tmp_path, monkeypatch):
    """The graph builder on a small package of its own, with each kind of import it must see."""
    root = tmp_path / "directional"
    (root / "low").mkdir(parents=True)
    (root / "__init__.py").write_text("")
    (root / "low" / "__init__.py").write_text("")
    (root / "low" / "a.py").write_text("def f():\n    from directional.high import b\n")
    (root / "low" / "c.py").write_text("from . import a\nx = a._hidden\n")
    (root / "high.py").write_text("from directional.low.a import _secret, f\n")
    (root / "b.py").write_text("import numpy\n")
    monkeypatch.setattr(sys.modules[__name__], "PACKAGE", root)
    modules.cache_clear()
    try:
        found = modules()
    finally:
        modules.cache_clear()
    assert found["directional.low.a"].imports == {"directional.high"}  # deferred, to a name
    assert found["directional.low.c"].imports == {"directional.low.a"}  # relative
    assert found["directional.low.c"].private == ["directional.low.a._hidden"]  # attribute
    assert found["directional.high"].private == ["directional.low.a._secret"]
    assert found["directional.b"].external == {"numpy"}
    graph = {name: m.imports for name, m in found.items()}
    assert cycles(graph) == [["directional.high", "directional.low.a"]]


def test_cycles_finds_a_loop_through_three_modules_and_none_in_a_tree():
    assert cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert cycles({"a": {"b", "c"}, "b": {"c"}, "c": set()}) == []


# ----------------------------------------------------------------------------- the rules


def _layer_modules(name: str) -> list[str]:
    return sorted(m for m in modules() if layer(m) == name)


@pytest.mark.parametrize("name", _layer_modules("method"))
def test_the_method_imports_no_other_layer_and_does_no_io(name):
    module = modules()[name]
    above = sorted(m for m in module.imports if layer(m) not in (None, "method"))
    assert not above, f"{name} imports {above}"
    assert not {m for m in module.imports if m.split(".")[1:2] in (["testproblems"], ["benchmarking"])}
    assert not module.external & IO_MODULES, f"{name} imports {sorted(module.external & IO_MODULES)}"


@pytest.mark.parametrize("lower", LAYERS[1:-1])
def test_each_layer_imports_nothing_from_the_layers_above_it(lower):
    above = set(LAYERS[LAYERS.index(lower) + 1 :])
    wrong = {
        name: sorted(m for m in modules()[name].imports if layer(m) in above)
        for name in _layer_modules(lower)
    }
    assert not {name: targets for name, targets in wrong.items() if targets}


def test_the_method_is_a_layer_with_modules():
    # the rules above would pass vacuously on an empty or renamed layer
    assert {layer(name) for name in modules()} >= set(LAYERS)
    assert len(_layer_modules("method")) >= 8


@pytest.mark.parametrize("name", sorted(modules()))
def test_no_module_imports_another_modules_underscore_names(name):
    assert not modules()[name].private


def test_no_import_cycle():
    graph = {name: module.imports for name, module in modules().items()}
    assert cycles(graph) == []


def test_at_most_ten_modules_at_the_top_level():
    top = sorted(path.name for path in PACKAGE.glob("*.py"))
    assert len(top) <= 10, top

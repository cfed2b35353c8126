"""The package layout: one room (sub-package) per pipeline stage, dependencies pointing one way.

The rule (DEVELOPERS.md, "The map"): a module may import its own room and rooms below it in
RANK, never one above or beside it; another room is reached only through the names its
``__init__`` lists in ``__all__``; and no chain of imports, however lazy, comes back to where it
started. The checker reads the imports with ``ast`` (module level and inside functions alike).
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import netgen

PACKAGE = Path(netgen.__file__).resolve().parent

#: the order of the rooms, lowest first (top-level modules are rooms of their own; templates and
#: sims are the data packages shipped in the wheel)
RANK = {"__init__": 0, "templates": 0, "sims": 0, "errors": 0, "fileio": 1, "lifeline": 1, "lazy": 1, "design": 2, "synthesis": 3, "netlist": 4, "simulator": 5,
        "periodic": 6, "results": 7, "pipeline": 8, "studies": 9, "handoff": 9, "cli": 10}
#: what a room is allowed besides the rule (none today; say why beside any entry added here)
ALLOWED: set[tuple[str, str]] = set()


def _module_name(root: Path, path: Path) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__" and len(parts) > 1:
        parts = parts[:-1]
    return ".".join([root.name, *parts])


def _exports(root: Path, room: str) -> dict[str, str]:
    """The ``_EXPORTS`` table (public name -> module) of a room's ``__init__``, or its ``__all__``."""
    init = root / room / "__init__.py"
    if not init.is_file():
        return {}
    for node in ast.parse(init.read_text()).body:
        if isinstance(node, ast.Assign) and any(isinstance(t, ast.Name) and t.id == "_EXPORTS" for t in node.targets):
            return {k.value: v.value for k, v in zip(node.value.keys, node.value.values)}
    for node in ast.parse(init.read_text()).body:  # a room whose __init__ imports eagerly
        if isinstance(node, ast.ImportFrom) and node.level == 1:
            return {a.asname or a.name: node.module for a in node.names}
    return {}


def check_layout(root: Path) -> list[str]:
    """Every breach of the layout rule in the package at ``root``, one sentence each."""
    top = root.name
    modules = {_module_name(root, p): p for p in root.rglob("*.py")}
    exports = {room: _exports(root, room) for room in RANK}
    problems: list[str] = []
    graph: dict[str, set[str]] = {m: set() for m in modules}

    def room_of(mod: str) -> str:
        parts = mod.split(".")
        return parts[1] if len(parts) > 1 else "__init__"

    for mod, path in modules.items():
        here = room_of(mod)
        is_pkg = path.name == "__init__.py"
        tree = ast.parse(path.read_text())
        package_aliases: dict[str, str] = {}
        for node in ast.walk(tree):
            targets: list[tuple[str, list[str]]] = []
            if isinstance(node, ast.ImportFrom):
                if node.level:
                    base = mod.split(".")[: len(mod.split(".")) - node.level + (1 if is_pkg else 0)]
                    full = ".".join(base + ([node.module] if node.module else []))
                else:
                    full = node.module or ""
                if full.split(".")[0] != top:
                    continue
                targets.append((full, [a.name for a in node.names]))
                if full == top:
                    package_aliases.update({a.asname or a.name: a.name for a in node.names if a.name in RANK})
            elif isinstance(node, ast.Import):
                for a in node.names:
                    if a.name.split(".")[0] == top and a.name != top:
                        targets.append((a.name, []))
            for full, names in targets:
                if full == top:  # from netgen import errors / a room / __version__
                    for name in names:
                        dest = name if name in RANK else "__init__"
                        _edge(graph, mod, f"{top}.{dest}" if dest != "__init__" else top, here, dest, problems, path)
                    continue
                dest = room_of(full)
                if dest != here and full.count(".") > 1:
                    problems.append(f"{path.relative_to(root.parent)}: imports {full}, inside room '{dest}'; "
                                    f"import from {top}.{dest} (its __all__) instead.")
                if dest != here and full.count(".") == 1 and exports.get(dest):
                    for name in names:
                        if name not in exports[dest]:
                            problems.append(f"{path.relative_to(root.parent)}: '{name}' is not in {full}.__all__.")
                for name in names or [""]:
                    sub = f"{full}.{name}"
                    if sub in modules:
                        target = sub
                    elif full.count(".") == 1 and name in exports.get(dest, {}):
                        target = f"{full}.{exports[dest][name]}"
                    else:
                        target = full
                    _edge(graph, mod, target, here, dest, problems, path)
        for node in ast.walk(tree):  # attributes of a room imported as a whole: only its public names
            if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id in package_aliases:
                room = package_aliases[node.value.id]
                if exports.get(room) and node.attr not in exports[room]:
                    problems.append(f"{path.relative_to(root.parent)}: '{node.attr}' is not in {top}.{room}.__all__.")
                elif exports.get(room):
                    graph[mod].add(f"{top}.{room}.{exports[room][node.attr]}")
    problems += [f"import circle: {' -> '.join(c)}" for c in _cycles(graph)]
    return problems


def _edge(graph, mod, target, here, dest, problems, path):
    if target != mod:
        graph[mod].add(target)
    if dest == here or (here, dest) in ALLOWED:
        return
    if dest not in RANK or here not in RANK:
        problems.append(f"{path}: room '{dest if dest not in RANK else here}' is not in the layout's RANK table.")
    elif RANK[dest] >= RANK[here]:
        problems.append(f"{path.name} (room '{here}') imports room '{dest}', which is not below it.")


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """One cycle per strongly connected component with more than one module (Tarjan)."""
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in graph:
                continue
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_layout_has_no_upward_import_and_no_circle():
    assert check_layout(PACKAGE) == []


def test_layout_check_catches_an_upward_import_and_a_circle(tmp_path):
    # a copy of the package with one deliberate upward import (design -> results) must fail
    import shutil

    copy = tmp_path / "netgen"
    shutil.copytree(PACKAGE, copy, ignore=shutil.ignore_patterns("__pycache__"))
    target = copy / "design" / "records.py"
    target.write_text(target.read_text() + "\n\ndef _late():\n    from netgen.results import analyse\n    return analyse\n")
    problems = check_layout(copy)
    assert any("room 'design'" in p and "'results'" in p for p in problems), problems
    assert any(p.startswith("import circle") for p in problems), problems


def test_every_room_says_what_it_takes_and_gives():
    for room in RANK:
        init = PACKAGE / room / "__init__.py"
        if init.is_file():
            mod = __import__(f"netgen.{room}", fromlist=["__all__"])
            assert mod.__doc__ and len(mod.__doc__) > 80, room
            assert mod.__all__, room
            for name in mod.__all__:
                assert getattr(mod, name) is not None, (room, name)


def test_no_public_name_is_also_a_module_name():
    # importing a submodule binds its name on the package, so an exported function named like a
    # module of its room would be replaced by that module depending on import order
    for room in RANK:
        if (PACKAGE / room).is_dir():
            modules = {p.stem for p in (PACKAGE / room).glob("*.py")}
            assert not modules & set(_exports(PACKAGE, room)), room


def test_cli_import_pulls_in_no_heavy_library():
    # the command line starts without the simulator, plotting, cluster or scipy stacks
    code = ("import sys, netgen.cli; heavy = [m for m in ('PySpice', 'matplotlib', 'dask', 'distributed', 'scipy') "
            "if m in sys.modules]; print(','.join(heavy))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_exported_names_are_not_shadowed_by_submodules():
    # An exported name equal to a submodule's name is replaced by that module once any module of the
    # room imports the submodule (Python's import system sets the package attribute), so callers get
    # a module instead of the function: netgen.periodic exported 'fourier' this way, and the
    # fallback Fourier path of results.analysis failed with "'module' object is not callable"
    # whenever the simulator had been imported first (the hand-off pack's portable re-run).
    code = ("import importlib, pkgutil, types, netgen\n"
            "bad = []\n"
            "for room in pkgutil.iter_modules(netgen.__path__):\n"
            "    if not room.ispkg or room.name in ('templates', 'sims', 'cli'):\n"
            "        continue\n"
            "    pkg = importlib.import_module('netgen.' + room.name)\n"
            "    for sub in pkgutil.iter_modules(pkg.__path__):\n"
            "        if sub.name != '__main__':\n"
            "            importlib.import_module(pkg.__name__ + '.' + sub.name)\n"
            "    bad += [pkg.__name__ + '.' + n for n in getattr(pkg, '__all__', [])\n"
            "            if isinstance(getattr(pkg, n), types.ModuleType)]\n"
            "print(bad)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]", out

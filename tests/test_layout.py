"""The package layout: imports flow one way, from the leaves to the command line.

Every import of a module of render/ (at module level or inside a function) must
point to a room earlier in the order below, or stay inside its own room; a room
never imports a later one, so there can be no import cycle between rooms.  Inside
a room, the import graph must have no cycle either.  DEVELOPERS.md draws the same
order.
"""

import ast
import subprocess
import sys
from pathlib import Path

import render

PACKAGE = Path(render.__file__).parent
# Rooms in import order; a room may import only from rooms earlier in the list.
ORDER = [
    {"errors", "units", "about", "progress", "guards"},
    {"spacetime"}, {"camera"}, {"geodesics"}, {"light"}, {"imaging"}, {"scene"},
    {"output"}, {"film", "measure", "tables"}, {"parallel"}, {"api"}, {"composer"}, {"cli"},
    {"__main__", "__init__"},
]
RANK = {room: rank for rank, rooms in enumerate(ORDER) for room in rooms}


def _modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(PACKAGE).with_suffix("").parts
        yield path, parts


def _imported_modules(path, parts):
    """Dotted names (below render) of every relative or absolute import of render in a file."""
    package = list(parts[:-1]) if parts[-1] != "__init__" else list(parts[:-1])
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)]
                target = base + (node.module.split(".") if node.module else [])
            elif node.module and (node.module == "render" or node.module.startswith("render.")):
                target = node.module.split(".")[1:]
            else:
                continue
            names = [a.name for a in node.names]
            yield target, names
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("render."):
                    yield alias.name.split(".")[1:], []


def _room(parts):
    return parts[0] if parts else "__init__"


def test_every_module_belongs_to_a_known_room():
    unknown = {_room(parts) for _, parts in _modules()} - set(RANK)
    assert not unknown, f"modules outside the layout of DEVELOPERS.md: {sorted(unknown)}"


def test_rooms_import_only_earlier_rooms():
    wrong = []
    for path, parts in _modules():
        room = _room(parts)
        for target, names in _imported_modules(path, parts):
            # "from . import x" inside a package names its own room's modules.
            target_room = _room(target) if target else (names[0] if len(parts) == 1 else room)
            if target_room != room and RANK[target_room] >= RANK[room]:
                wrong.append(f"{'.'.join(parts)} imports {'.'.join(target) or names}")
    assert not wrong, "imports against the one-way order:\n" + "\n".join(wrong)


def test_no_import_cycle_inside_a_room():
    modules = {".".join(parts): (path, parts) for path, parts in _modules()}
    edges = {name: set() for name in modules}
    for name, (path, parts) in modules.items():
        for target, names in _imported_modules(path, parts):
            for candidate in [".".join(target)] + [".".join(target + [n]) for n in names]:
                if candidate in modules and candidate != name and not name.startswith(candidate):
                    edges[name].add(candidate)
    # Depth-first search for a back edge.
    state, stack = {}, []

    def visit(node):
        state[node] = "open"
        stack.append(node)
        for nxt in edges[node]:
            if state.get(nxt) == "open":
                raise AssertionError("import cycle: " + " -> ".join(stack[stack.index(nxt):] + [nxt]))
            if nxt not in state:
                visit(nxt)
        stack.pop()
        state[node] = "done"

    for node in edges:
        if node not in state:
            visit(node)


def test_at_most_eight_modules_directly_in_render():
    top = [p.name for p in PACKAGE.glob("*.py") if p.name not in ("__init__.py", "__main__.py")]
    assert len(top) <= 8, top


def test_a_command_does_not_import_the_heavy_libraries_it_may_not_need():
    # Every `nullray` command imports render.api and render.cli.  scipy.signal (glare) and
    # scipy.optimize (shadow and ring fits) took ~3 s of every start between them; they,
    # matplotlib, astropy and dask are imported by the functions that use them.
    code = ("import sys, render.api, render.cli; print(' '.join(m for m in ('scipy.signal', "
            "'scipy.optimize', 'scipy.stats', 'matplotlib', 'astropy', 'dask') if m in sys.modules))")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    assert run.stdout.split() == []

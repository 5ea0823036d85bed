"""The benchmark scripts still fit the package they measure.

The benchmarks import from ``render`` inside their ``main`` functions (so that
``--help`` is quick), and nothing else runs them: after the package was
reorganised, ``bench_core.py`` and ``bench_color.py`` stopped at an ImportError
that no test saw.  Here every ``from render... import name`` in every benchmark,
wherever it stands in the file, must name something that exists.
"""

import ast
import importlib
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
SCRIPTS = sorted((REPO / "benchmarks").glob("*.py"))


def render_imports(path):
    """(module, name) for each ``from render[...] import name`` anywhere in ``path``."""
    tree = ast.parse(path.read_text(), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.level == 0 and node.module \
                and node.module.split(".")[0] == "render":
            for alias in node.names:
                yield node.module, alias.name


def test_there_are_benchmarks_to_check():
    assert len(SCRIPTS) >= 10
    assert sum(1 for path in SCRIPTS for _ in render_imports(path)) >= 30


@pytest.mark.parametrize("path", SCRIPTS, ids=lambda path: path.name)
def test_every_name_a_benchmark_imports_exists(path):
    missing = [f"{module}.{name}" for module, name in render_imports(path)
               if not hasattr(importlib.import_module(module), name)
               and importlib.util.find_spec(f"{module}.{name}") is None]
    assert missing == [], f"{path.name} imports names that do not exist: {missing}"


def test_the_check_sees_a_missing_name(tmp_path):
    script = tmp_path / "bench_broken.py"
    script.write_text("def main():\n    from render.imaging.still import observer_rays\n")
    (module, name), = render_imports(script)
    assert not hasattr(importlib.import_module(module), name)


"""The package's shape, measured from its source (issue 16, "one home per primitive").

* no function over 80 lines in fitkit/check/ (common practice, no source: a
  function a reader can hold on one screen);
* no import of a private name (``_name``) from another package of fitkit;
* no import cycle between fitkit's modules at import time (the io layouts and
  sniffer once imported each other);
* one home each for the noise estimator's constant, the sample interval and
  the residual sum that fits are scored on: layers above the engine read them,
  they do not recompute them.

Python's own ast module reads the source; nothing is imported.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "fitkit"
MAX_CHECK_FUNCTION_LINES = 80
SOURCES = sorted(p for p in PACKAGE.rglob("*.py") if "migrations" not in p.parts)


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


MODULES = {_module_name(p): p for p in SOURCES}


def _package_of(path: Path) -> str:
    name = _module_name(path)
    return name if path.name == "__init__.py" else name.rsplit(".", 1)[0]


def _relative_imports(path: Path, module_level_only: bool):
    """(target module name, imported names) of every relative import in ``path``."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    nodes = tree.body if module_level_only else ast.walk(tree)
    base = _package_of(path).split(".")
    for node in nodes:
        if isinstance(node, ast.ImportFrom) and node.level:
            stem = base[:len(base) - (node.level - 1)]
            yield ".".join(stem + ([node.module] if node.module else [])), [a.name for a in node.names]


def test_no_function_in_check_is_longer_than_80_lines():
    long = []
    for path in sorted((PACKAGE / "check").glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                lines = node.end_lineno - node.lineno + 1
                if lines > MAX_CHECK_FUNCTION_LINES:
                    long.append(f"{path.name}:{node.name} ({lines} lines)")
    assert not long


def test_the_function_length_measure_sees_a_long_function():
    # the measure itself: a 90-line function is found, an 80-line one is not
    body = "\n".join(f"    x{i} = {i}" for i in range(88))
    tree = ast.parse(f"def f():\n{body}\n    return 0\n\ndef g():\n    return 1\n")
    sizes = {n.name: n.end_lineno - n.lineno + 1 for n in tree.body}
    assert sizes == {"f": 90, "g": 2}


def test_no_private_name_is_imported_across_packages():
    found = []
    for path in SOURCES:
        here = _package_of(path)
        for target, names in _relative_imports(path, module_level_only=False):
            package = target if target in MODULES and MODULES[target].name == "__init__.py" \
                else target.rsplit(".", 1)[0]
            private = [n for n in names if n.startswith("_") and not n.startswith("__")]
            if private and package != here:
                found.append(f"{_module_name(path)} imports {private} from {target}")
    assert not found


def test_no_import_cycle_between_modules():
    graph = {}
    for name, path in MODULES.items():
        deps = set()
        for target, names in _relative_imports(path, module_level_only=True):
            for n in names:
                dep = f"{target}.{n}" if f"{target}.{n}" in MODULES else target
                if dep in MODULES and dep != name:
                    deps.add(dep)
        graph[name] = deps
    # Tarjan's strongly connected components: a component of two or more modules is a cycle
    index, low, stack, on_stack, cycles = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                cycles.append(sorted(comp))

    for v in graph:
        if v not in index:
            visit(v)
    assert not cycles


def _files_matching(pattern: str, folders) -> list[str]:
    rx = re.compile(pattern)
    return [str(p.relative_to(PACKAGE)) for p in SOURCES
            if p.relative_to(PACKAGE).parts[0] in folders and rx.search(p.read_text(encoding="utf-8"))]


ABOVE_THE_ENGINE = ("check", "part_values", "batch", "report", "cli", "trends", "line_store")


@pytest.mark.parametrize("pattern,what", [
    (r"median\(np\.diff\(", "the sample interval (Capture / StepSegment.sample_interval)"),
    (r"np\.diff\([^)]*time", "the sample interval (Capture / StepSegment.sample_interval)"),
    (r"np\.sum\(\(s\.data - s\.fitted\) \*\* 2\)", "the residual sum (fitting.information.residual_sum)"),
    (r"def corrected_aic|2 \* k \* \(k \+ 1\)", "AICc (fitting.information.corrected_aic)"),
    (r"input_after != s\.input_before", "'has a measured input' (fitting.information.has_measured_input)"),
])
def test_layers_above_the_engine_do_not_recompute_a_primitive(pattern, what):
    assert _files_matching(pattern, ABOVE_THE_ENGINE) == [], what


def test_the_noise_estimators_constant_has_one_home():
    # Hampel's 1.4826 (= 1 / 0.6745) is written once, in conditioning/noise.py
    code = re.compile(r"^[^#\n]*\b(1\.4826|0\.6745)", re.M)
    homes = [str(p.relative_to(PACKAGE)) for p in SOURCES
             if code.search(re.sub(r'"""[\s\S]*?"""', "", p.read_text(encoding="utf-8")))]
    assert homes == ["conditioning/noise.py"]


def test_the_sample_interval_is_computed_in_one_place_above_the_reader():
    # Capture.sample_interval (the reader's) and StepSegment (a segment built by hand)
    found = _files_matching(r"median\(np\.diff\((self|t)\b", ("capture.py", "conditioning"))
    assert sorted(found) == ["capture.py", "conditioning/segment.py"]

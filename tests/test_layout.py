"""The package layout keeps its arrows pointing down (DEVELOPERS.md, "Layout").

Every import between sub-packages is read from the source with ``ast`` and checked
against the layer order; a module may import its own sub-package, any lower layer, and
the listed extra arrows.  Source for the rule: this project's own DEVELOPERS.md (a
design rule, not a published fact); the check itself is plain ``ast`` parsing.
"""

import ast
from pathlib import Path

import pytest

import channelizer

PACKAGE = Path(channelizer.__file__).parent

# Lower number = lower layer.  Same number: siblings that must not import each other.
LAYER = {
    "errors": -1,
    "units": 0,
    "strict_yaml": 0,
    "planning": 1,
    "io": 1,
    "dsp": 2,
    "engines": 3,
    "checks": 4,
    "views": 5,
    "run": 6,
    "handoff": 6,
    "demo": 7,
    "bench": 7,
    "cli": 8,
    "__main__": 9,
    "__init__": 9,
}

TOP_LEVEL_MODULES = 6  # issue 10: the top level holds at most six modules
MAX_MODULE_LINES = 620  # "no module over about 600 lines"


def _modules():
    return sorted(p for p in PACKAGE.rglob("*.py"))


def _owner(path):
    rel = path.relative_to(PACKAGE)
    return rel.parts[0] if len(rel.parts) > 1 else rel.stem


def _imported_owners(path):
    """Sub-packages (or top-level modules) of channelizer that ``path`` imports."""
    tree = ast.parse(path.read_text())
    rel = path.relative_to(PACKAGE)
    here = list(rel.parts[:-1])  # package path inside channelizer
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level == 0:
                if node.module and node.module.split(".")[0] == "channelizer":
                    parts = node.module.split(".")[1:]
                else:
                    continue
            else:
                base = here[: len(here) - (node.level - 1)] if node.level > 1 else here
                parts = base + (node.module.split(".") if node.module else [])
            if parts:
                found.add(parts[0])
            else:  # "from . import x" at the top level
                found.update(a.name for a in node.names)
        elif isinstance(node, ast.Import):
            for a in node.names:
                bits = a.name.split(".")
                if bits[0] == "channelizer" and len(bits) > 1:
                    found.add(bits[1])
    return found


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_point_down(path):
    owner = _owner(path)
    for target in _imported_owners(path):
        if target == owner:
            continue
        assert target in LAYER, f"{path}: imports unknown part {target!r}"
        assert LAYER[target] < LAYER[owner] or (owner, target) == ("dsp", "planning"), (
            f"{path.relative_to(PACKAGE)} ({owner}, layer {LAYER[owner]}) imports {target} "
            f"(layer {LAYER[target]}): arrows must point down"
        )


def test_every_sub_package_says_what_it_is_for():
    for init in PACKAGE.glob("*/__init__.py"):
        doc = ast.get_docstring(ast.parse(init.read_text()))
        assert doc and "May import" in doc, f"{init}: docstring must say what it is for and what it may import"
        assert init.parent.name in LAYER, f"{init.parent.name} has no place in the layer order"


def test_top_level_is_small():
    top = [p.name for p in PACKAGE.glob("*.py")]
    assert len(top) <= TOP_LEVEL_MODULES, top


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_no_module_is_huge(path):
    n = len(path.read_text().splitlines())
    assert n <= MAX_MODULE_LINES, f"{path.relative_to(PACKAGE)} has {n} lines; split it where it holds two ideas"

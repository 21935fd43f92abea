"""The public API: what `import loopwise` offers, lazily, and what type checkers see."""
from __future__ import annotations

import ast
import json
import subprocess
import sys
from pathlib import Path

import loopwise

PACKAGE = Path(loopwise.__file__).parent


def test_every_exported_name_resolves_to_its_definition():
    for name in loopwise.__all__:
        value = getattr(loopwise, name)
        if name != "__version__":
            assert value.__name__ == name, name


def test_importing_the_package_loads_nothing_heavy():
    code = ("import json, sys, loopwise; "
            "print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in "
            "('numpy', 'matplotlib', 'networkx', 'lark', 'scipy'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert json.loads(out.stdout) == []


def test_type_checkers_see_the_same_names():
    """The TYPE_CHECKING imports name exactly the lazily exported names."""
    tree = ast.parse((PACKAGE / "__init__.py").read_text(encoding="utf-8"))
    seen = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and getattr(node.test, "id", None) == "TYPE_CHECKING":
            for imp in node.body:
                seen.update(a.name for a in imp.names)
    assert seen == set(loopwise.__all__) - {"__version__"}


def test_the_package_is_marked_typed():
    assert (PACKAGE / "py.typed").is_file()


def test_unknown_names_raise_attribute_error():
    try:
        loopwise.no_such_thing  # noqa: B018
    except AttributeError as exc:
        assert "no_such_thing" in str(exc)
    else:
        raise AssertionError("expected AttributeError")

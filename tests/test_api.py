"""The public API: every name in every module's __all__ resolves, the core stays free of
plotting and command-line imports."""

from __future__ import annotations

import ast
import importlib
import pkgutil
import subprocess
import sys
from pathlib import Path

import pytest

import uqreport

MODULES = sorted(
    m.name
    for m in pkgutil.walk_packages(uqreport.__path__, "uqreport.")
    if not m.name.endswith("__main__")
)


@pytest.mark.parametrize("name", MODULES)
def test_all_names_resolve(name):
    mod = importlib.import_module(name)
    exported = getattr(mod, "__all__", None)
    assert exported is not None, f"{name} has no __all__"
    for item in exported:
        assert hasattr(mod, item), f"{name}.__all__ names {item!r}, which does not exist"


def test_package_reexports():
    for item in uqreport.__all__:
        assert hasattr(uqreport, item)


def test_core_does_not_import_plotting_or_argparse():
    """The computational core imports neither matplotlib, reportlab nor argparse (only the
    report package and the command line may; STYLE).  Checked on the source, because scipy
    itself pulls in argparse through unittest."""
    root = Path(uqreport.__file__).parent
    offenders = []
    for path in root.rglob("*.py"):
        rel = path.relative_to(root).as_posix()
        if rel == "cli.py" or rel.startswith("report/"):
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                names = [node.module]
            for nm in names:
                if nm.split(".")[0] in ("matplotlib", "reportlab", "argparse"):
                    offenders.append(f"{rel}: {nm}")
    assert offenders == []
    code = (
        "import sys, uqreport.analysis;"
        "print('matplotlib' in sys.modules, 'reportlab' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


def test_the_budget_module_is_not_hidden_by_a_function():
    """``import uqreport.budget as b`` gives the module (a re-exported function of the same
    name would shadow it: Python resolves the 'as' form by attribute)."""
    import types

    import uqreport.budget as b

    assert isinstance(b, types.ModuleType) and callable(b.budget)

"""Package layout rule from DEVELOPERS.md: kipup.core runs without any notebook package."""
from __future__ import annotations

import subprocess
import sys

NOTEBOOK_MODULES = ("kipup.widgets", "ipywidgets", "pythreejs", "matplotlib", "IPython")

IMPORT_ALL_OF_CORE = """
import importlib, pkgutil, sys
import kipup.core
for info in pkgutil.walk_packages(kipup.core.__path__, "kipup.core."):
    if not info.name.endswith("__main__"):
        importlib.import_module(info.name)
{extra}
names = {names!r}
print(" ".join(sorted(m for m in sys.modules if any(m == n or m.startswith(n + ".") for n in names))))
"""


def notebook_modules_after_importing_core(extra: str = "") -> list[str]:
    code = IMPORT_ALL_OF_CORE.format(extra=extra, names=NOTEBOOK_MODULES)
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split()


def test_core_never_imports_the_notebook_side():
    found = notebook_modules_after_importing_core()
    assert found == [], f"importing kipup.core pulls in notebook modules: {found}"


def test_the_check_can_see_a_notebook_import():
    assert "ipywidgets" in notebook_modules_after_importing_core("import ipywidgets")

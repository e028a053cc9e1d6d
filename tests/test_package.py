"""The package's surface: every public name imports from `glassbox` itself, and importing
the package loads none of the heavy libraries (constructed checks of the layout)."""

from __future__ import annotations

import subprocess
import sys

import glassbox


def test_every_public_name_imports_from_the_package():
    for name in glassbox.__all__:
        assert getattr(glassbox, name) is not None, name


def test_importing_the_package_loads_no_heavy_library():
    code = ("import sys, glassbox; print(' '.join(m for m in ('sklearn', 'pygam', "
            "'matplotlib', 'pulp', 'dask') if m in sys.modules))")
    loaded = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=True).stdout.split()
    assert loaded == []

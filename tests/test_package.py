"""The top-level package: everyday names importable from ``bandsolve``, loaded on first use."""

from __future__ import annotations

import importlib
import json
import subprocess
import sys

import pytest

import bandsolve


@pytest.mark.parametrize("name", sorted(n for n in bandsolve.__all__ if n != "__version__"))
def test_every_public_name_is_the_object_of_its_module(name):
    module = importlib.import_module(bandsolve._API[name])
    assert getattr(bandsolve, name) is getattr(module, name)


def test_unknown_names_raise_attribute_error():
    with pytest.raises(AttributeError, match="no attribute 'nothing_here'"):
        bandsolve.nothing_here  # noqa: B018


@pytest.mark.slow
def test_importing_the_package_loads_no_numerical_library():
    code = ("import sys, json, bandsolve\n"
            "print(json.dumps([m for m in ('numpy', 'pandas', 'scipy', 'sklearn') "
            "if m in sys.modules]))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=120, env=None).stdout
    assert json.loads(out) == []
    code = "from bandsolve import read_spectra, build_cls, build_pls, load_model; print('ok')"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=120).stdout
    assert out.strip() == "ok"

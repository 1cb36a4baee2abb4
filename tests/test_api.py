"""The top-level Python API: every name of ``specproc.__all__`` is the object its module
defines, the type checkers' import block lists the same names, and ``specproc.quantify`` is the
function whatever was imported first. (Import cost: tests/test_cli_imports.py.)"""

import ast
import importlib
import inspect
import subprocess
import sys

import specproc


def test_every_public_name_is_its_modules_object():
    lazy = specproc._LAZY
    assert specproc.__all__ == sorted({*lazy, "InvalidInputError", "SpecprocError",
                                       "__version__"})
    for name, module in lazy.items():
        assert getattr(specproc, name) is getattr(importlib.import_module(module), name), name
        assert name in dir(specproc)
    assert specproc.__version__ == importlib.metadata.version("specproc")
    assert set(dir(specproc)) >= set(specproc.__all__)


def test_type_checking_block_lists_the_lazy_names():
    """The ``if TYPE_CHECKING`` imports (what type checkers and editors see) name the same
    objects from the same modules as the run-time table."""
    tree = ast.parse(inspect.getsource(specproc))
    (block,) = [n for n in tree.body if isinstance(n, ast.If)
                and getattr(n.test, "id", "") == "_TYPE_CHECKING"]
    imported = {alias.name: node.module for node in block.body
                if isinstance(node, ast.ImportFrom) for alias in node.names}
    assert imported == specproc._LAZY


def test_unknown_name_is_an_attribute_error():
    try:
        specproc.no_such_thing  # noqa: B018
    except AttributeError as exc:
        assert "no_such_thing" in str(exc)
    else:
        raise AssertionError("no AttributeError")


_ORDER_PROBE = """
import sys
import specproc
if sys.argv[1] == "submodule-first":
    import specproc.quantify  # binds the sub-package's name on the package
    from specproc.analysis import analyse_scan  # imports specproc.quantify's modules
from specproc.quantify import Tissue, quantify
from specproc.quantify import result as result_module
assert specproc.quantify is quantify is result_module.quantify, specproc.quantify
assert specproc.Tissue is Tissue
print("ok")
"""


def test_quantify_is_the_function_in_any_import_order():
    for order in ("submodule-first", "package-first"):
        proc = subprocess.run([sys.executable, "-c", _ORDER_PROBE, order],
                              capture_output=True, text=True, timeout=120)
        assert proc.stdout.strip() == "ok", (order, proc.stderr)


def test_star_import_takes_exactly_the_public_names():
    namespace: dict = {}
    exec("from specproc import *", namespace)
    assert set(namespace) - {"__builtins__"} == set(specproc.__all__)
    assert namespace["analyse_scan"] is specproc.analysis.analyse_scan

"""The public names of each subpackage, and the API page generated from them."""

import importlib
import inspect
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "docs"))
import make_api  # noqa: E402

PACKAGES = ("stelltemp.observing", "stelltemp.catalog", "stelltemp.engine", "stelltemp.reduction")
#: public names still without a runnable example in their docstring (shrink this list, never grow it)
NO_EXAMPLE_YET = {
    "stelltemp.observing": {"Instrument"},
    "stelltemp.reduction": {"FilterFit", "Observations", "StandardPhotometry", "Transformation",
                            "apply_transformation", "fit_filter", "observations_from_table",
                            "read_transformation", "standardise_night", "standards_from_table",
                            "write_transformation"},
}


@pytest.mark.parametrize("package", PACKAGES)
def test_every_exported_name_resolves_and_is_documented(package):
    module = importlib.import_module(package)
    assert module.__all__, f"{package} exports nothing"
    assert len(set(module.__all__)) == len(module.__all__)
    for name in module.__all__:
        obj = getattr(module, name)
        assert not inspect.ismodule(obj), f"{package}.{name} is shadowed by a submodule"
        assert make_api.summary(package, name, obj), f"{package}.{name} has no docstring"
        if (inspect.isfunction(obj) or inspect.isclass(obj)) and name not in NO_EXAMPLE_YET.get(package, ()):
            assert make_api.example(obj).startswith(">>>"), f"{package}.{name} has no example"
    # from-import works for every name, as users write it
    namespace = {}
    exec(f"from {package} import {', '.join(module.__all__)}", namespace)
    assert all(name in namespace for name in module.__all__)


def test_subpackages_defer_their_heavy_imports():
    """Importing a subpackage loads none of its modules until a name is used (CLI start-up)."""
    code = ("import sys, stelltemp.observing, stelltemp.catalog, stelltemp.reduction\n"
            "loaded = [m for m in sys.modules if m.startswith(('stelltemp.observing.', 'stelltemp.catalog.',"
            " 'stelltemp.reduction.'))]\n"
            "print(','.join(loaded))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": str(ROOT), "PATH": ""})
    assert out.stdout.strip() == ""


def test_the_api_page_is_up_to_date():
    page = (ROOT / "docs" / "api.md").read_text(encoding="utf-8")
    assert page == make_api.render(), "docs/api.md is out of date: run python docs/make_api.py"
    for package, _ in make_api.SECTIONS:
        for name in importlib.import_module(package).__all__:
            assert f"### `{name}" in page


def test_readme_links_the_api_page():
    assert "docs/api.md" in (ROOT / "README.md").read_text(encoding="utf-8")

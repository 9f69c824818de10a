"""Write docs/api.md, the API reference, from the docstrings and ``__all__``.

Run ``python docs/make_api.py`` after changing a public name or its
docstring; ``tests/test_api_page.py`` fails while the page is out of date.
Each entry is the docstring's first line and its first example (the
Examples section, run as a doctest in the module itself).
"""

import importlib
import inspect
import re
import sys
from pathlib import Path

PAGE = Path(__file__).resolve().parent / "api.md"

#: the documented packages and modules, in the page's order
SECTIONS = (
    ("stelltemp.engine", "temperatures of stars from their photometry"),
    ("stelltemp.catalog", "target lists of any size"),
    ("stelltemp.observing", "planning a night: count rates, S/N, exposure times, the Sun"),
    ("stelltemp.reduction", "instrumental to standard magnitudes"),
    ("stelltemp.photometry", "synthetic photometry of any spectrum"),
    ("stelltemp.bandgrid", "the fast tables of blackbody magnitudes"),
)


def constant_comment(module_name, name):
    """The ``#:`` comment above ``name = …`` in the module that defines it ('' if none)."""
    module = importlib.import_module(module_name)
    for home in [module] + [m for m in vars(module).values() if inspect.ismodule(m)]:
        try:
            source = inspect.getsource(home)
        except (OSError, TypeError):
            continue
        found = re.search(rf"^#: (.+)\n{re.escape(name)} = ", source, re.M)
        if found:
            return found.group(1).strip()
    return ""


def exported(module_name):
    """(name, object) for every name in the module's ``__all__``."""
    module = importlib.import_module(module_name)
    return [(name, getattr(module, name)) for name in module.__all__]


def summary(module_name, name, obj):
    """One line describing ``obj``: its docstring's first line, or a constant's ``#:`` comment."""
    if inspect.isfunction(obj) or inspect.isclass(obj):
        doc = inspect.getdoc(obj) or ""
        return doc.strip().splitlines()[0] if doc.strip() else ""
    return constant_comment(module_name, name)


def example(obj):
    """The first example of ``obj``'s Examples section (prompt lines with their output), or ''."""
    if not (inspect.isfunction(obj) or inspect.isclass(obj)):
        return ""
    doc = inspect.getdoc(obj) or ""
    part = re.split(r"^Examples\n-+\n", doc, maxsplit=1, flags=re.M)
    if len(part) < 2:
        return ""
    body = re.split(r"^\S.*\n-+\n", part[1], maxsplit=1, flags=re.M)[0]  # up to the next section
    lines = body.strip("\n").splitlines()
    start = next((i for i, line in enumerate(lines) if line.startswith(">>>")), None)
    if start is None:
        return ""
    return "\n".join(lines[start:]).rstrip()


def signature(obj):
    try:
        return str(inspect.signature(obj))
    except (TypeError, ValueError):
        return ""


def render():
    """The text of docs/api.md."""
    out = ["# stelltemp API reference", "",
           "Generated from the docstrings by `docs/make_api.py` (do not edit by hand; "
           "`tests/test_api_page.py` checks that it is up to date). Every name below is "
           "importable from its package, e.g. `from stelltemp.engine import estimate`. "
           "Quantities are accepted at these edges; plain numbers take the unit each "
           "docstring names.", ""]
    for module_name, what in SECTIONS:
        out += [f"## `{module_name}` — {what}", ""]
        for name, obj in exported(module_name):
            kind = "class" if inspect.isclass(obj) else ("function" if callable(obj) else "constant")
            head = f"### `{name}{signature(obj)}`" if kind != "constant" else f"### `{name}`"
            out += [head, "", f"{summary(module_name, name, obj)}", ""]
            ex = example(obj)
            if ex:
                out += ["```python", ex, "```", ""]
    return "\n".join(out).rstrip() + "\n"


def main():
    PAGE.write_text(render(), encoding="utf-8")
    print(f"wrote {PAGE}")


if __name__ == "__main__":
    sys.exit(main())

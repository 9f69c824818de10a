"""Build step: ship the demo scenario inside the package.

``catalogs_demo/`` stays at the top of the source tree (where a newcomer
finds it); at build time its files are copied into the wheel as
``stelltemp/demo_scenario/`` so that ``stelltemp tour`` works from any
installed copy, in any directory.  Source checkouts and editable installs
read the top-level folder directly (see ``stelltemp.tour.find_demo_dir``).
All other settings live in ``pyproject.toml``.
"""

import shutil
from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py

HERE = Path(__file__).resolve().parent
DEMO_SOURCE = HERE / "catalogs_demo"
DEMO_TARGET = ("stelltemp", "demo_scenario")  # keep in step with stelltemp.tour.PACKAGED_DEMO


class BuildWithDemo(build_py):
    """``build_py`` that also copies ``catalogs_demo/`` into the built package."""

    def run(self):
        super().run()
        if self.editable_mode:  # an editable install reads the source tree's folder
            return
        if not (DEMO_SOURCE / "scenario.toml").is_file():
            raise SystemExit(f"catalogs_demo/scenario.toml not found in {HERE}: cannot ship the demo")
        target = Path(self.build_lib).joinpath(*DEMO_TARGET)
        if target.exists():
            shutil.rmtree(target)
        shutil.copytree(DEMO_SOURCE, target, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))


setup(cmdclass={"build_py": BuildWithDemo})

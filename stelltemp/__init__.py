"""stelltemp: temperatures of stars from their colours, and exposure planning.

Physics core: :mod:`stelltemp.planck`; passbands: :mod:`stelltemp.passbands`;
synthetic photometry: :mod:`stelltemp.photometry` and the fast
:mod:`stelltemp.bandgrid`; temperatures: :mod:`stelltemp.engine`.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("stelltemp")
except PackageNotFoundError:  # running from a source tree
    __version__ = "0.1.0+src"

__all__ = ["__version__"]

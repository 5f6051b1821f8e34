"""affix: calibrated linear estimators x = A*y + b, fitted, proven in fixed point, emitted for MCUs."""
from __future__ import annotations

from affix._version import __version__

from affix.errors import AffixError
from affix.model import Model

# Imported eagerly on purpose: the stage package ``affix.fit`` and the API
# function ``affix.fit`` share a name, and binding the function after the
# package has loaded is what leaves ``affix.fit`` callable.
from affix.fit.estimator import fit

__all__ = ["AffixError", "Model", "__version__", "fit"]

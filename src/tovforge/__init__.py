"""tovforge: exact neutron-star structure, EOS-parameter grids, surrogates and exported evaluators."""

from __future__ import annotations

import logging

__version__ = "0.1.0"

# Library messages go to the "tovforge" logger; without a configured handler they are dropped
# (the command line installs one; see tovforge.cli._common.configure_logging).
logging.getLogger(__name__).addHandler(logging.NullHandler())

__all__ = ["__version__"]

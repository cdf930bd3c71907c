"""truthsieve: screen nightly multi-source label batches before they shape a shared rule."""

from truthsieve.core import *  # noqa: F403
from truthsieve.core import __all__ as _core_names
from truthsieve.exceptions import TruthsieveError

__version__ = "0.1.0"
__all__ = [*_core_names, "TruthsieveError", "__version__"]

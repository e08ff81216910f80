"""Old import path of :mod:`audit.workflows.strategies`, kept for one release (0.1.x) because the README
documented it; import from ``audit.workflows.strategies`` instead. Removed in 0.2."""

import warnings as _warnings

from audit.workflows.strategies import *  # noqa: F401,F403

_warnings.warn("audit.strategies moved to audit.workflows.strategies; the old path is removed in 0.2",
               DeprecationWarning, stacklevel=2)

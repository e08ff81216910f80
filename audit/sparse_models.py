"""Old import path of :mod:`audit.documents.sparse`, kept for one release (0.1.x) because the README
documented it; import from ``audit.documents.sparse`` instead. Removed in 0.2."""

import warnings as _warnings

from audit.documents.sparse import *  # noqa: F401,F403

_warnings.warn("audit.sparse_models moved to audit.documents.sparse; the old path is removed in 0.2",
               DeprecationWarning, stacklevel=2)

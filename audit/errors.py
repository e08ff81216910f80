"""Exceptions raised by lti-audit.

One tree, drawn once::

    AuditError
    ├── InvalidModelError        (also ValueError)  a model document or file is not valid
    ├── IncompatibleModelsError  (also ValueError)  models cannot be compared as given
    └── NumericalTroubleError    (also ArithmeticError) a computation could not be trusted

Front ends translate these into exit statuses (CLI) in one place each; a user never
sees a traceback for bad input.
"""

from __future__ import annotations


class AuditError(Exception):
    """Base class of every error raised on purpose by lti-audit."""


class InvalidModelError(AuditError, ValueError):
    """A model document, file or array set is not a valid LTI model.

    The message names the field path (``state_space.c``), shows the offending
    value or shape, and says what was expected.
    """

    def __init__(self, message: str, *, field: str | None = None, source: str | None = None):
        self.field = field
        self.source = source
        prefix = f"{source}: " if source else ""
        super().__init__(prefix + message)


class IncompatibleModelsError(AuditError, ValueError):
    """Two or more models cannot be compared (input/output counts, time domains...)."""


class NumericalTroubleError(AuditError, ArithmeticError):
    """A numerical routine failed or produced results that cannot be trusted."""

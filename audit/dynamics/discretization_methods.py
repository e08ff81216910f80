"""Names of the discretization methods (standard library only, so front ends stay fast).

The names are the trade's full terms, used the same way on the command line
(``--discretization``), in claims manifests, in service submissions and in reports.
:mod:`audit.dynamics.discretization` implements each method;
:mod:`audit.dynamics.discretization_checks` checks claims made with these names.
"""

from __future__ import annotations

from typing import Literal, get_args

from audit.errors import InvalidModelError

DiscretizationMethod = Literal[
    "zero-order-hold", "triangle-hold", "bilinear", "matched-pole-zero", "impulse-invariant"
]
METHODS: tuple[str, ...] = get_args(DiscretizationMethod)

METHOD_DESCRIPTIONS: dict[str, str] = {
    "zero-order-hold": "input held constant over each sample period",
    "triangle-hold": "first-order hold: input interpolated linearly between samples",
    "bilinear": "s = (2/T)(z - 1)/(z + 1), optionally prewarped at one frequency",
    "matched-pole-zero": "poles and zeros mapped by z = exp(sT), gain matched at DC (SISO)",
    "impulse-invariant": "discrete impulse response equals T times the sampled continuous one",
}
"""One line per method, for help texts and error messages."""

PREWARP_METHODS: tuple[str, ...] = ("bilinear",)
"""Methods that accept a prewarp frequency."""


def accepted_methods_text() -> str:
    """``"zero-order-hold (input held ...), triangle-hold (...), ..."``."""
    return "; ".join(f"{name} ({METHOD_DESCRIPTIONS[name]})" for name in METHODS)


def discretization_method(value: object, *, field: str = "method") -> DiscretizationMethod:
    """Validate a discretization method name.

    Parameters
    ----------
    value : object
        The name as given (command line, manifest, submission, Python call).
    field : str, keyword-only
        Where it came from, for the error message.

    Returns
    -------
    str
        ``value`` itself when it is one of :data:`METHODS`.

    Raises
    ------
    InvalidModelError
        For any other value; the message lists every accepted name with one line on
        what it means.

    Examples
    --------
    >>> discretization_method("bilinear")
    'bilinear'
    """
    if isinstance(value, str) and value in METHODS:
        return value  # type: ignore[return-value]
    raise InvalidModelError(
        f"{field}: got {value!r} but one of these discretization methods was expected: "
        f"{accepted_methods_text()}",
        field=field,
    )


__all__ = ["DiscretizationMethod", "METHODS", "METHOD_DESCRIPTIONS", "PREWARP_METHODS",
           "accepted_methods_text", "discretization_method"]

"""The public surface (CONVENTIONS.md item 1): every name in __all__ exists and is documented."""

import audit


def test_every_public_name_exists_and_is_documented():
    for name in audit.__all__:
        obj = getattr(audit, name)
        if isinstance(obj, (int, float, str, dict, tuple)):
            continue  # constants are documented in their module
        assert (obj.__doc__ or "").strip(), f"audit.{name} has no docstring"


def test_unknown_name_raises_attribute_error():
    import pytest

    with pytest.raises(AttributeError):
        audit.no_such_thing  # noqa: B018

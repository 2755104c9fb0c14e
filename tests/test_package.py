"""The package's public surface."""

import synthgen


def test_every_exported_name_resolves():
    """Each name in synthgen.__all__ is importable from the package."""
    for name in synthgen.__all__:
        assert getattr(synthgen, name) is not None


def test_unknown_attribute_raises():
    """A missing name is an AttributeError, as for any module."""
    import pytest

    with pytest.raises(AttributeError, match="no attribute 'nope'"):
        synthgen.nope  # noqa: B018

"""The package imports and exposes its version."""

import imgcut


def test_version_is_a_string():
    assert isinstance(imgcut.__version__, str) and imgcut.__version__.count(".") >= 1

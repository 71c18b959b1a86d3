"""The Examples sections of ``encode`` and ``decode`` run as doctests (numpydoc, issue 14)."""

import doctest

import pytest

import codec.encoder
import codec.stream.decode


@pytest.mark.parametrize("module", [codec.encoder, codec.stream.decode])
def test_examples_in_docstrings_run(module):
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0  # the examples exist
    assert result.failed == 0

"""File names from archive facets stay inside their folder (the facet-level checks are in tests/faults/test_security.py)."""
import doctest

import sensemble.contract.names as names


def test_docstring_examples_run():
    assert doctest.testmod(names).failed == 0


def test_long_facets_are_cut():
    assert len(names.safe_name("x" * 500)) == names.MAX_NAME_LENGTH

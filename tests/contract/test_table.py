"""The table's contract: one spelling of the columns, a typed row that keeps their order."""
import dataclasses
import doctest

import numpy as np
import pytest

import sensemble.contract.table as table
from sensemble.contract.table import ALL_COLUMNS, COLUMN_META, COLUMNS, NUMERIC, TEXT_META, SensitivityRow


def test_row_fields_are_the_columns_in_order():
    # DESIGN.md, "Outputs of extraction": the contract's seventeen columns first, in this order
    assert tuple(f.name for f in dataclasses.fields(SensitivityRow)) == ALL_COLUMNS
    assert ALL_COLUMNS[: len(COLUMNS)] == COLUMNS and len(COLUMNS) == 17


def test_every_column_has_a_long_name():
    assert set(COLUMN_META) == set(NUMERIC) and set(TEXT_META) | set(NUMERIC) == set(ALL_COLUMNS)


def test_row_holds_plain_numbers():
    row = SensitivityRow("ALDER-1", "r1i1p1f1", ecs_eff=np.float32(3.5), n_years=np.int64(150))
    assert type(row.ecs_eff) is float and type(row.n_years) is int
    assert SensitivityRow.from_dict(row.as_dict()) == row
    with pytest.raises(TypeError):
        SensitivityRow.from_dict({"model": "A", "member": "r1", "unknown_column": 1.0})


def test_docstring_examples_run():
    assert doctest.testmod(table).failed == 0

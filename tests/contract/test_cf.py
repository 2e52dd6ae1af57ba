"""CF metadata helpers: the Conventions string, history lines, anomaly attributes."""
from __future__ import annotations

import re

from compliance_checker.cf.util import StandardNameTable

from sensemble.contract.cf import (ANOMALY_STANDARD_NAMES, CONVENTIONS, TEMPERATURE_DIFFERENCE, anomaly_attributes,
                                   history_line)

TAS = {"standard_name": "air_temperature", "long_name": "Near-Surface Air Temperature", "units": "K",
       "units_metadata": "temperature: on_scale", "cell_methods": "area: time: mean",
       "cell_measures": "area: areacella"}


def test_conventions_names_the_cf_version():
    # CF §2.6.1: "CF-<version>"; the IOOS checker's cf:1.11 suite looks for exactly "CF-1.11"
    assert CONVENTIONS == "CF-1.11"


def test_history_line_starts_with_a_utc_time_stamp():
    # CF §2.6.2: a time stamp, then the program and what it was asked (common practice, no stricter source)
    line = history_line("sensemble extract /a/b")
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ sensemble extract /a/b", line)


def test_anomaly_names_are_in_the_cf_standard_name_table():
    # source: the CF standard name table shipped with the IOOS compliance checker
    table = StandardNameTable()
    for quantity, anomaly in ANOMALY_STANDARD_NAMES.items():
        assert quantity in table and anomaly in table
        assert table[quantity].canonical_units == table[anomaly].canonical_units


def test_temperature_anomaly_is_a_difference_with_its_own_standard_name():
    out = anomaly_attributes(TAS, "anomaly vs the control")
    # CF §3.1.2 and the table's description of air_temperature_anomaly: units_metadata "temperature: difference"
    assert out["standard_name"] == "air_temperature_anomaly" and out["units_metadata"] == TEMPERATURE_DIFFERENCE
    assert out["long_name"] == "Near-Surface Air Temperature, anomaly vs the control" and out["units"] == "K"
    assert "cell_measures" not in out  # CF §7.2: the area it measured was averaged away
    assert out["cell_methods"] == "area: time: mean"  # the history is kept; the writer adds what it did
    assert TAS["standard_name"] == "air_temperature"  # the input is not changed


def test_flux_anomaly_keeps_a_long_name_only():
    # source: the CF standard name table shipped with the IOOS checker has no anomaly name for a TOA flux
    rsdt = {"standard_name": "toa_incoming_shortwave_flux", "units": "W m-2"}
    assert "toa_incoming_shortwave_flux_anomaly" not in StandardNameTable()
    out = anomaly_attributes(rsdt)
    assert "standard_name" not in out and "units_metadata" not in out
    assert out["long_name"] == "anomaly" and out["units"] == "W m-2"

"""CF metadata every NetCDF file of ours carries: `Conventions`, the `history` audit line, anomaly attributes.

CF conventions §2.6.1: `Conventions` names the CF version the file follows ("CF-1.11"); other conventions may
follow it, blank-separated. §2.6.2: `history` is an audit trail, one line per program that wrote or changed the
file, each line conventionally a UTC time stamp, the program and what it was asked to do. The IOOS compliance
checker (suite `cf:1.11`) warns when either is missing or the version is not named; tests/test_cf_outputs.py runs it
on every kind of file we write.
"""
from __future__ import annotations

import time

__all__ = ["CF_VERSION", "CONVENTIONS", "history_line", "anomaly_attributes", "with_cell_method",
           "ANOMALY_STANDARD_NAMES", "TEMPERATURE_ON_SCALE", "TEMPERATURE_DIFFERENCE"]

CF_VERSION = "1.11"
CONVENTIONS = f"CF-{CF_VERSION}"

# CF 1.11 §3.1.2: a temperature says whether it is on its scale (an absolute temperature) or a difference
# (an anomaly, a warming); unit conversion differs between the two (degC → K adds 273.15 only on scale).
TEMPERATURE_ON_SCALE = "temperature: on_scale"
TEMPERATURE_DIFFERENCE = "temperature: difference"


def history_line(action: str) -> str:
    """One `history` line (CF §2.6.2): "<UTC time stamp> <action>"."""
    return f"{time.strftime('%Y-%m-%dT%H:%M:%SZ', time.gmtime())} {action}"


def with_cell_method(attrs, method: str) -> dict:
    """A copy of `attrs` with `method` (e.g. "area: mean") appended to `cell_methods` (CF §7.3: the methods in
    the order they were applied).

    >>> with_cell_method({"units": "K", "cell_methods": "time: mean"}, "area: mean")["cell_methods"]
    'time: mean area: mean'
    """
    out = dict(attrs)
    out["cell_methods"] = f"{str(out.get('cell_methods', '')).strip()} {method}".strip()
    return out


# CF standard names of the anomaly of a quantity, where the CF standard name table has one (checked against the
# table shipped with the IOOS compliance checker, version 93). Fluxes have no anomaly names: their anomalies carry
# a long name only, since a flux's own name would claim the absolute flux.
ANOMALY_STANDARD_NAMES = {"air_temperature": "air_temperature_anomaly"}


def anomaly_attributes(attrs, what: str = "anomaly") -> dict:
    """CF attributes of an annual global-mean anomaly made from a variable with attributes `attrs`.

    The long name says it is an anomaly (`what`); the standard name becomes the anomaly's own name or is dropped;
    a temperature anomaly is a temperature difference (CF §3.1.2); `cell_measures` goes, since the area it
    measured was averaged away (CF §7.2 describes the variable's own cells); `cell_methods` keeps its history.

    >>> anomaly_attributes({"standard_name": "air_temperature", "long_name": "Near-Surface Air Temperature",
    ...                     "units": "K", "cell_measures": "area: areacella"})["standard_name"]
    'air_temperature_anomaly'
    """
    out = {k: v for k, v in dict(attrs).items() if k not in ("standard_name", "cell_measures", "units_metadata")}
    standard = ANOMALY_STANDARD_NAMES.get(attrs.get("standard_name"))
    if standard:
        out["standard_name"] = standard
    if standard and standard.endswith("temperature_anomaly"):
        out["units_metadata"] = TEMPERATURE_DIFFERENCE
    name = str(attrs.get("long_name", "")).strip()
    out["long_name"] = f"{name}, {what}" if name else what
    return out

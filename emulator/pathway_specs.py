"""The scenarios a batch emulates, as the config names them (`[[emulator.pathways]]`): checked without loading the
emulator, so that reading a config stays light."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .errors import EmulatorInputError

ROUTES = ("auto", "gp", "parameters")
_SOURCES = ("experiment", "forcing_file", "co2_file")


@dataclass(frozen=True)
class PathwaySpec:
    """One scenario to emulate: exactly one of `experiment`, `forcing_file`, `co2_file`; a route."""

    name: str
    experiment: str | None = None
    forcing_file: str | None = None
    co2_file: str | None = None
    route: str = "auto"
    forcing_f2x: float | None = None  # F2x (W m-2) a forcing file's values belong to; None: ensemble median

    @property
    def kind(self) -> str:
        return "archive" if self.experiment else ("file" if self.forcing_file else "co2")

    def forcing(self) -> dict:
        """`ParameterPathwayEmulator` keywords of the spec's file, if it names one."""
        if self.forcing_file:
            return {"forcing_source": "file", "forcing_file": self.forcing_file, "forcing_f2x": self.forcing_f2x}
        if self.co2_file:
            return {"forcing_source": "co2", "co2_file": self.co2_file}
        return {}


def pathway_specs(items, available: dict | None = None, check_files: bool = True) -> list[PathwaySpec]:
    """Specs from config tables; one-line errors naming the spec. `available`: {experiment: runs} to check
    against; `check_files`: the files must exist."""
    specs = []
    for number, item in enumerate(items, start=1):
        item = dict(item)
        label = f"pathway #{number}" + (f" '{item['name']}'" if "name" in item else "")
        unknown = sorted(set(item) - {"name", "route", "forcing_f2x", *_SOURCES})
        if unknown:
            raise EmulatorInputError(f"{label}: unknown key(s) {', '.join(unknown)}",
                                     hint=f"use name, route, forcing_f2x and {', '.join(_SOURCES)}")
        files = [k for k in _SOURCES[1:] if item.get(k)]
        if len(files) > 1 or not (files or item.get("experiment")):
            raise EmulatorInputError(f"{label}: give an experiment, a forcing_file or a co2_file (an experiment "
                                     f"may add one file: its known forcing); got {len(files)} files")
        route = item.get("route", "auto")
        if route not in ROUTES:
            raise EmulatorInputError(f"{label}: route {route!r} is not one of {', '.join(ROUTES)}")
        f2x = item.get("forcing_f2x")
        if f2x is not None and (isinstance(f2x, bool) or not isinstance(f2x, (int, float)) or f2x <= 0):
            raise EmulatorInputError(f"{label}: forcing_f2x must be a positive number (W m-2), got {f2x!r}")
        name = str(item.get("name") or item.get("experiment") or Path(item[files[0]]).stem)
        spec = PathwaySpec(name, route=route, forcing_f2x=None if f2x is None else float(f2x),
                           **{k: str(item[k]) for k in _SOURCES if item.get(k)})
        if spec.kind != "archive" and route == "gp":
            raise EmulatorInputError(f"{label}: the gp route needs the scenario's runs; a {files[0]} has none",
                                     hint='use route = "parameters" (or "auto")')
        if spec.kind == "archive" and available is not None and spec.experiment not in available:
            raise EmulatorInputError(f"{label}: experiment {spec.experiment!r} is not in the archive's series; "
                                     f"available: {', '.join(sorted(available)) or 'none'}")
        for key in files:
            if check_files and not Path(item[key]).is_file():
                raise EmulatorInputError(f"{label}: no such {key}", path=item[key])
        specs.append(spec)
    names = [s.name for s in specs]
    if len(set(names)) != len(names):
        raise EmulatorInputError(f"pathway names repeat: {', '.join(sorted({n for n in names if names.count(n) > 1}))}")
    return specs

"""Planning: the catalogue grouped into units — one (model, member) with its control — before any value is read.

With ``[archive] scenarios`` set, a unit keeps only the listed scenario runs and the runs they continue (a
historical-type parent, found from the listed run's ``parent_experiment_id``): the other runs are never opened.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import netCDF4

from sensemble.contract.flags import CONTROL_OTHER_MEMBER

from .catalog import Catalog, RunFiles
from .outcome import Failure
from .settings import ExtractionSettings


@dataclass
class Unit:
    """One (model, member): the runs that make one row of the table and one series file."""

    model: str
    member: str
    control: RunFiles | None
    abrupt: RunFiles | None
    onepct: RunFiles | None
    others: list[RunFiles] = field(default_factory=list)
    flags: list[str] = field(default_factory=list)
    mip_era: str = "CMIP6"  # the generation whose role ids matched (CMIP5 or CMIP6)

    @property
    def key(self) -> str:
        return f"{self.model}_{self.member}"

    def runs(self) -> list[RunFiles]:
        return [r for r in (self.control, self.abrupt, self.onepct, *self.others) if r is not None]


def plan_units(catalog: Catalog, settings: ExtractionSettings) -> tuple[list[Unit], list[Failure]]:
    """Group the catalogue into (model, member) units, each with its control.

    Roles are matched per generation: CMIP5 runs by ``settings.roles("CMIP5")`` (``abrupt4xCO2``, …),
    the others by the CMIP6 ids, so one batch takes a mixed archive as it is.
    """
    units, failures = [], []
    for model in catalog.models():
        for era in sorted({r.mip_era for r in catalog.runs_of(model)}):
            control_id, abrupt_id, onepct_id = settings.roles(era)
            of_era = [r for r in catalog.runs_of(model) if r.mip_era == era]
            controls = [r for r in of_era if r.experiment_id == control_id]
            for member in sorted({r.member for r in of_era}):
                non_control = [r for r in of_era if r.member == member and r.experiment_id != control_id]
                if not non_control:
                    continue
                flags = []
                control = next((r for r in controls if r.member == member), None)
                if control is None and len(controls) == 1:
                    control = controls[0]
                    flags.append(CONTROL_OTHER_MEMBER)
                if control is None:
                    why = (f"no {control_id} run" if not controls else
                           f"{control_id} has several members ({', '.join(r.member for r in controls)}) and none "
                           f"is {member}")
                    failures.append(Failure(model, member, "model", f"model {model} member {member}: {why} — "
                                            "add the control run or map the control role in the config"
                                            + (" ([archive] cmip5_control)" if era == "CMIP5" else "")))
                    continue
                abrupt = next((r for r in non_control if r.experiment_id == abrupt_id), None)
                onepct = next((r for r in non_control if r.experiment_id == onepct_id), None)
                others = [r for r in non_control if r.experiment_id not in (abrupt_id, onepct_id)]
                others = listed_scenarios(others, settings, control_id)
                units.append(Unit(model, member, control, abrupt, onepct, others, flags, mip_era=era))
    return units, failures


def parent_experiment(run: RunFiles) -> str | None:
    """The ``parent_experiment_id`` global attribute of a run's first file ("" when absent), None when unreadable.

    Only the file's header is read; an unreadable file is left for the extraction to report with its cause.
    """
    first = next((paths[0] for paths in run.files.values() if paths), None)
    if first is None:
        return None
    try:
        with netCDF4.Dataset(first) as nc:
            return str(getattr(nc, "parent_experiment_id", "")).strip()
    except OSError:
        return None


def listed_scenarios(others: list[RunFiles], settings: ExtractionSettings, control_id: str) -> list[RunFiles]:
    """The runs ``[archive] scenarios`` asks for, with the runs they continue; all of them when it is unset.

    When a listed run's parent cannot be read from its header, every run is kept: the extraction then reads
    them all and reports the unreadable file, as without the setting.
    """
    if settings.scenarios is None:
        return others
    by_id = {r.experiment_id: r for r in others}
    keep: set[str] = set()
    for experiment_id in settings.scenarios:
        run = by_id.get(experiment_id)
        while run is not None and run.experiment_id not in keep:
            keep.add(run.experiment_id)
            parent = parent_experiment(run)
            if parent is None:
                return others
            run = by_id.get(parent) if parent != control_id else None
    return [r for r in others if r.experiment_id in keep]

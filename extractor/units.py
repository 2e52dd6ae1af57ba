"""Planning: the catalogue grouped into units — one (model, member) with its control — before any value is read."""
from __future__ import annotations

from dataclasses import dataclass, field

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
                    flags.append("control_other_member")
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
                units.append(Unit(model, member, control, abrupt, onepct, others, flags, mip_era=era))
    return units, failures

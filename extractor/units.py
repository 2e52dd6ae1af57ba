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

    @property
    def key(self) -> str:
        return f"{self.model}_{self.member}"

    def runs(self) -> list[RunFiles]:
        return [r for r in (self.control, self.abrupt, self.onepct, *self.others) if r is not None]


def plan_units(catalog: Catalog, settings: ExtractionSettings) -> tuple[list[Unit], list[Failure]]:
    """Group the catalogue into (model, member) units, each with its control."""
    units, failures = [], []
    for model in catalog.models():
        controls = [r for r in catalog.runs_of(model) if r.experiment_id == settings.control]
        for member in catalog.members(model):
            runs = catalog.runs_of(model, member)
            non_control = [r for r in runs if r.experiment_id != settings.control]
            if not non_control:
                continue
            flags = []
            control = next((r for r in controls if r.member == member), None)
            if control is None and len(controls) == 1:
                control = controls[0]
                flags.append("control_other_member")
            if control is None:
                why = (f"no {settings.control} run" if not controls else
                       f"{settings.control} has several members ({', '.join(r.member for r in controls)}) and none is {member}")
                failures.append(Failure(model, member, "model", f"model {model} member {member}: {why} — "
                                        "add the control run or map the control role in the config"))
                continue
            abrupt = next((r for r in non_control if r.experiment_id == settings.abrupt), None)
            onepct = next((r for r in non_control if r.experiment_id == settings.onepct), None)
            others = [r for r in non_control if r.experiment_id not in (settings.abrupt, settings.onepct)]
            units.append(Unit(model, member, control, abrupt, onepct, others, flags))
    return units, failures

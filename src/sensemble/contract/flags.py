"""Quality flags: every flag the stages write, with its meaning, spelled once.

A flag is a word in the ``flags`` column of the sensitivity table (``;``-separated) or of a pathway. Some are
families: a prefix followed by a variable or experiment id (``control_lacks_rsutcs``). The README's list of
flags is generated from `TABLE_FLAGS` by `flags_markdown` (tests/contract/test_flags.py checks it).
"""
from __future__ import annotations

from collections.abc import Iterable


# the sensitivity table's flags; a name ending in "_" is the prefix of a family (the id follows it)
BRANCH_ASSUMED = "branch_assumed"
BRANCH_TIME_UNREADABLE = "branch_time_unreadable"
CONTROL_SHORT = "control_short"
CONTROL_OTHER_MEMBER = "control_other_member"
AREACELLA_OTHER_MEMBER = "areacella_other_member"
COS_WEIGHTS = "cos_weights"
LON_BOUNDS_DERIVED = "lon_bounds_derived"
PARTIAL_YEARS = "partial_years"
TIME_TRIMMED = "time_trimmed"
CALENDAR_DEFAULTED = "calendar_defaulted"
ATTRIBUTE_MISMATCH = "attribute_mismatch"
ENERGY_LEAK = "energy_leak"
POOR_FIT = "poor_fit"
NONPHYSICAL = "nonphysical"
NO_ABRUPT = "no_abrupt"
NO_ONEPCT = "no_onepct"
ONEPCT_SHORT = "onepct_short"
RUN_FAILED = "run_failed"
#: suffix of ``ecs_eff_unbounded`` / ``ecs_late_unbounded`` (the flag is the column's name, "_", this)
ECS_UNBOUNDED = "unbounded"
ECS_EFF_UNBOUNDED = f"ecs_eff_{ECS_UNBOUNDED}"
ECS_LATE_UNBOUNDED = f"ecs_late_{ECS_UNBOUNDED}"
CONTROL_LACKS = "control_lacks_"
CHAIN_LACKS = "chain_lacks_"
UNLINKED = "unlinked_"

#: every flag of the sensitivity table and what it tells the reader, in the order the README lists them
TABLE_FLAGS = {
    BRANCH_ASSUMED: "no branch information: the control's start was used",
    BRANCH_TIME_UNREADABLE: "the branch time attribute is not a number: it was ignored, as if absent",
    CONTROL_SHORT: "the control ends before the experiment; its drift fit is extrapolated",
    CONTROL_OTHER_MEMBER: "the member has no control of its own; another member's was used",
    AREACELLA_OTHER_MEMBER: "the member has no cell areas of its own; another member's were used",
    COS_WEIGHTS: "no cell areas or latitude bounds: cos φ weights",
    LON_BOUNDS_DERIVED: "no longitude bounds: cell widths from halfway between the centres",
    PARTIAL_YEARS: "incomplete years dropped",
    TIME_TRIMMED: "the variables of a run cover different periods: only the months all of them have were used",
    CALENDAR_DEFAULTED: "no calendar attribute: CF's default `standard` was used",
    ATTRIBUTE_MISMATCH: "file attributes disagree with the path; the path names the run and the report names the file",
    ENERGY_LEAK: "the control's mean N is beyond the threshold",
    POOR_FIT: "Gregory r² below the threshold",
    NONPHYSICAL: "positive feedback, or ECS ≤ 0 or beyond the limit: values are still reported",
    NO_ABRUPT: "the member lacks the abrupt CO2-quadrupling run",
    NO_ONEPCT: "the member lacks the 1 %-per-year CO2 run",
    ONEPCT_SHORT: "the 1 % run is shorter than the TCR window: `tcr` left empty",
    RUN_FAILED: "one of the member's other runs failed; see the report",
    ECS_EFF_UNBOUNDED: "the feedback is not distinguishable from zero at the 90 % level: the interval of `ecs_eff` "
                       "has no upper end, q95 = `inf` (or no interval exists: both empty)",
    ECS_LATE_UNBOUNDED: "the same for `ecs_late`",
    CONTROL_LACKS: "the control lacks this variable: it is left out of the experiment's anomalies",
    CHAIN_LACKS: "one part of a joined historical-and-scenario chain lacks this variable: it is left out",
    UNLINKED: "this experiment's parent chain does not reach the control: it was not extracted",
}

#: the flags of emulated pathways (emulate/pathways.csv)
EXTRAPOLATED = "extrapolated"
PATHWAY_FLAGS = {EXTRAPOLATED: "the inputs lie outside the training range"}


def is_family(name: str) -> bool:
    """Whether a registered name is the prefix of a family of flags."""
    return name.endswith("_")


def describe(flag: str, registry: dict[str, str] | None = None) -> str | None:
    """The meaning of a written flag (a family's member included); None for a flag we never write.

    >>> describe("control_lacks_rsutcs").startswith("the control lacks this variable")
    True
    >>> describe("made_up") is None
    True
    """
    registry = TABLE_FLAGS | PATHWAY_FLAGS if registry is None else registry
    for name, meaning in registry.items():
        if flag == name or (is_family(name) and flag.startswith(name) and len(flag) > len(name)):
            return meaning
    return None


def join_flags(flags: Iterable[str]) -> str:
    """Flags as one ``;``-separated string: sorted, each once, empty ones dropped.

    Elements may themselves be ``;``-joined (e.g. a series' ``flags`` attribute).

    >>> join_flags(["poor_fit", "branch_assumed;control_short", "", POOR_FIT])
    'branch_assumed;control_short;poor_fit'
    """
    parts = {part.strip() for flag in flags for part in str(flag).split(";")}
    return ";".join(sorted(part for part in parts if part))


def split_flags(text: str | None) -> list[str]:
    """The flags of a ``;``-joined string, in order, empty ones dropped.

    >>> split_flags("branch_assumed;;poor_fit")
    ['branch_assumed', 'poor_fit']
    """
    return [part.strip() for part in str(text or "").split(";") if part.strip()]


def flags_markdown(registry: dict[str, str] = TABLE_FLAGS) -> str:
    """The README's paragraph on quality flags, wrapped at 118 columns."""
    items = [f"`{name}<id>` ({meaning})" if is_family(name) else f"`{name}` ({meaning})"
             for name, meaning in registry.items()]
    text = "Quality flags (`;`-separated in `flags`; `<id>` is a variable or experiment id): " + ", ".join(items) + "."
    lines, line = [], ""
    for word in text.replace(" %", "\0%").split(" "):  # never break before a per cent sign
        if line and len(line) + 1 + len(word) > 118:
            lines.append(line)
            line = word
        else:
            line = f"{line} {word}" if line else word
    lines.append(line)
    return "\n".join(lines).replace("\0", " ")

"""File names built from archive facets (model, member, experiment ids) that no facet can subvert."""
from __future__ import annotations

#: longest name a facet may give a file (most file systems allow 255 bytes; room is left for prefixes)
MAX_NAME_LENGTH = 120


def safe_name(text: str) -> str:
    """A file-name-safe version of a facet: nothing a path could climb out with, nothing hidden.

    Letters, digits and ``-.+=`` stay; anything else becomes ``_``; leading dots go.

    >>> safe_name("../../evil")
    '_.._evil'
    >>> safe_name("BIRCH-2_r1i1p1f1"), safe_name("ecs_eff=3.7,tcr=1.9")
    ('BIRCH-2_r1i1p1f1', 'ecs_eff=3.7_tcr=1.9')
    """
    cleaned = "".join(c if (c.isalnum() or c in "-.+=") else "_" for c in str(text))
    cleaned = cleaned.lstrip(".") or "_"
    return cleaned[:MAX_NAME_LENGTH]


def series_file_name(model: str, member: str) -> str:
    """The name of a run's series file, ``<model>_<member>.nc`` made safe.

    >>> series_file_name("ALDER-1", "r1i1p1f1")
    'ALDER-1_r1i1p1f1.nc'
    """
    return f"{safe_name(f'{model}_{member}')}.nc"

"""The flag registry: the README's list is generated from it, and every flag the extractor writes is in it."""
import doctest
import re
from pathlib import Path

import sensemble.contract.flags as flags
from sensemble.contract.flags import PATHWAY_FLAGS, TABLE_FLAGS, describe, flags_markdown

ROOT = Path(__file__).resolve().parents[2]
START = "<!-- generated from sensemble.contract.flags (flags_markdown); tests/contract/test_flags.py checks it -->\n"
END = "\n<!-- end of generated flag list -->"


def test_docstring_examples_run():
    assert doctest.testmod(flags).failed == 0


def test_readme_flag_list_is_the_registry():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert START in readme and END in readme, "README lost the markers of its generated flag list"
    listed = readme.split(START, 1)[1].split(END, 1)[0]
    assert listed == flags_markdown(), "regenerate it: python -c 'import sensemble.contract.flags as f; " \
                                       "print(f.flags_markdown())'"


def test_flags_the_stages_spell_are_registered():
    # the stages write flags through the registry's names; a quoted word handed to a flag list must be registered
    spelled = set()
    for path in [*ROOT.joinpath("extractor").glob("*.py"), *ROOT.joinpath("emulator").glob("*.py")]:
        text = path.read_text(encoding="utf-8")
        spelled |= set(re.findall(r"flags?\.(?:append|add)\(f?\"([a-z_]+)", text))
        spelled |= set(re.findall(r"flag = \"([a-z_]+)\"", text))
    assert all(describe(name) is not None for name in spelled), sorted(n for n in spelled if describe(n) is None)


def test_registry_has_no_name_twice_and_the_issue_s_flags():
    # issue 9 names flags the README once missed
    for name in ("time_trimmed", "lon_bounds_derived", "branch_time_unreadable", "control_lacks_rsutcs",
                 "chain_lacks_rtnt_cs", "unlinked_scen-x"):
        assert describe(name) is not None, name
    assert not set(TABLE_FLAGS) & set(PATHWAY_FLAGS)

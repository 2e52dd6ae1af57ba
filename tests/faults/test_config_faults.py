"""Fault 16: bad batch configs are refused before any work, in one line naming the file, the key and the fix.

(The config module's own tests are in tests/cli/test_config.py; these pin the fault list of issue 6.)
A window the archive cannot supply (early segment longer than the run) is only known once the run is
read: see test_window_past_a_short_run_in_the_config_names_its_key in test_archive_faults.py.
"""
from __future__ import annotations

import pytest

from sensemble.config import ConfigError, load_config

CASES = {
    "unknown key": ("[extraction]\nfit_yeras = [1, 150]\n",
                    ["[extraction] unknown key 'fit_yeras'", "did you mean 'fit_years'?"]),
    "unknown section": ("[extracton]\nfit_years = [1, 150]\n", ["unknown section [extracton]", "[extraction]"]),
    "wrong type": ("[extraction]\nbootstrap_samples = \"many\"\n",
                   ["[extraction] bootstrap_samples must be an integer", "got \"many\""]),
    "window not a pair": ("[extraction]\nfit_years = 150\n",
                          ["[extraction] fit_years must be an array of 2 integers [start, end]"]),
    "window reversed": ("[extraction]\nfit_years = [150, 1]\n",
                        ["fit_years must be [start, end] with 1 <= start <= end"]),
    "early segment longer than the fit window": (
        "[extraction]\nfit_years = [1, 100]\nearly_years = [1, 120]\nlate_years = [21, 100]\n",
        ["early_years [1, 120] must lie within fit_years [1, 100]", "shorten it or widen fit_years"]),
    "non-existent archive": ("[archive]\nroot = \"no/such/archive\"\n", ["[archive] root", "does not exist"]),
    "not TOML": ("[extraction\n", ["not valid TOML"]),
    "code where a number belongs": ("[extraction]\nforcing_ratio = \"__import__('os').getcwd()\"\n",
                                    ["[extraction] forcing_ratio must be a number"]),
}


@pytest.mark.parametrize("name", list(CASES))
def test_bad_config_is_refused_in_one_line(tmp_path, name):
    text, fragments = CASES[name]
    path = tmp_path / "batch.toml"
    path.write_text(text)
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    message = str(caught.value)
    assert "\n" not in message and message.startswith(str(path))
    for fragment in fragments:
        assert fragment in message, message


def test_missing_config_file(tmp_path):
    with pytest.raises(ConfigError, match="no such config file"):
        load_config(tmp_path / "absent.toml")

"""The package installs and its command answers."""
import subprocess
import sys


def test_cli_help_runs():
    out = subprocess.run([sys.executable, "-m", "sensemble.cli", "--help"], capture_output=True, text=True)
    assert out.returncode == 0
    assert "demo" in out.stdout


def _imported_after(code: str, modules: tuple[str, ...]) -> dict[str, bool]:
    """Which of `modules` a fresh interpreter has imported after running `code`."""
    probe = f"{code}\nimport sys\nprint(' '.join(str(m in sys.modules) for m in {modules!r}))"
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True)
    return dict(zip(modules, (word == "True" for word in out.stdout.split())))


def test_reading_a_config_with_pathways_leaves_the_emulator_unloaded(tmp_path):
    # common practice, no source: a config is checked before any data is read, without the emulator's
    # scikit-learn (a second of start-up for every command, `extract` included)
    forcing = tmp_path / "forcing.csv"
    forcing.write_text("year,forcing\n2000,1.0\n2001,1.1\n")
    config = tmp_path / "batch.toml"
    config.write_text(f'[[emulator.pathways]]\nforcing_file = "{forcing}"\n')
    code = f"from sensemble.config import load_config\nload_config({str(config)!r})"
    assert _imported_after(code, ("sklearn", "sensemble.emulator.gp")) == {"sklearn": False,
                                                                             "sensemble.emulator.gp": False}


def test_the_extraction_pipeline_imports_matplotlib_only_to_draw():
    # common practice, no source: a batch with figures off, and a worker that only reads, never pays for matplotlib
    assert _imported_after("import sensemble.extractor.pipeline", ("matplotlib",)) == {"matplotlib": False}
    drawn = _imported_after(
        "from sensemble.extractor.figures import gregory_png\n"
        "from sensemble.extractor.settings import ExtractionSettings\n"
        "png = gregory_png([1.0, 2.0, 3.0], [3.0, 2.0, 1.0], {'model': 'Alder-2', 'member': 'r1i1p1f1', 'erf_4x': 4.0, 'feedback': -1.0}, ExtractionSettings())\n"
        "assert png[:4] == b'\\x89PNG'", ("matplotlib",))
    assert drawn == {"matplotlib": True}

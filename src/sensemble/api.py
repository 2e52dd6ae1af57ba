"""The Python entry points: build a demo archive, extract sensitivities, emulate warming pathways.

They run the same steps as the command line with the same settings, checked by the same rules before any file is
read (a bad keyword raises `ConfigError` in one line naming the key and the closest valid value). The heavy
libraries are imported when a function runs, so `import sensemble` stays light.
"""
from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

from .config import ConfigError, config_from_dict, section_keys

if TYPE_CHECKING:  # annotations only
    import pandas as pd
    import xarray as xr

    from sensemble.emulator.run import EmulationResult

__all__ = ["ExtractionResult", "extract", "emulate", "make_demo_archive"]


@dataclass
class ExtractionResult:
    """What `extract` returns: the sensitivity table, the series, and what failed.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per (model, member), the columns of ``sensitivity.csv`` in the contract's order
        (`sensemble.contract.table`); a value that could not be computed is NaN, with the reason in ``flags``.
    series : dict
        ``{(model, member): {experiment_id: xarray.Dataset}}``: annual global-mean anomalies, drift-corrected against
        the control, ``year`` 1 = first year after the branch (the contents of ``series/<model>_<member>.nc``).
    failures : list
        One record per run or model that failed (``model``, ``member``, ``what``, ``message``, ``files``).
    out : pathlib.Path
        The folder holding every output file (a temporary one, kept as long as this result, when ``out=None``).
    batch : object
        The extractor's own record of the batch (rows, reused runs, files and bytes read, seconds).
    """

    table: "pd.DataFrame"
    series: dict
    failures: list
    out: Path
    batch: object = None
    _folder: object = field(default=None, repr=False)  # the TemporaryDirectory behind `out`, when there is one

    @property
    def ok(self) -> bool:
        """True when no run failed."""
        return not self.failures


def _settings_for(targets: tuple[str, ...], keywords: dict, caller: str) -> dict:
    """Keywords placed in their config sections ({section: {key: value}}), or ConfigError naming the closest key."""
    import difflib

    keys = section_keys()
    own = {key: section for section, table in keys.items() for key, (target, _) in table.items() if target in targets}
    data: dict[str, dict] = {}
    for keyword, value in keywords.items():
        section, _, key = keyword.rpartition("__")
        if section and section in keys and keys[section].get(key, ("", ""))[0] in targets:
            data.setdefault(section, {})[key] = value
        elif keyword in own:
            data.setdefault(own[keyword], {})[keyword] = value
        else:
            close = difflib.get_close_matches(keyword, list(own), n=1)
            hint = f"did you mean '{close[0]}'?" if close else f"valid settings: {', '.join(own)}"
            raise ConfigError(f"{caller}: unknown setting '{keyword}'; {hint}")
    return data


def extract(archive: str | os.PathLike, out: str | os.PathLike | None = None, *, force: bool = False,
            figures: bool = True, progress: bool = False, **settings) -> ExtractionResult:
    """Extract the sensitivities of every model in an archive.

    Parameters
    ----------
    archive : str or path
        The archive: a folder (CMIP data-reference-syntax tree or flat; NetCDF files or Zarr stores), or an ESM
        catalogue's ``.json`` file.
    out : str or path, optional
        Where ``sensitivity.csv``/``.nc``, ``series/``, ``report.md`` and ``figures/`` go. None: a temporary folder
        that lives as long as the returned result. A rerun into the same folder reuses finished models.
    force : bool
        Recompute models whose cached results are up to date.
    figures : bool
        Write the Gregory plots and the ensemble summary.
    progress : bool
        Show dask's progress bar.
    **settings
        Keys of the config's ``[archive]`` and ``[extraction]`` sections (fields of `ExtractionSettings`), e.g.
        ``fit_years=(1, 150)``, ``bootstrap_samples=1000``, ``include_models=("M-A",)``.

    Returns
    -------
    ExtractionResult

    Raises
    ------
    ConfigError
        A setting that is unknown or outside its allowed values, before any file is read.

    Examples
    --------
    >>> import sensemble, tempfile
    >>> root = sensemble.make_demo_archive(tempfile.mkdtemp(), n_models=1, grid=(4, 8),
    ...     years={"control": 60, "abrupt": 40, "onepct": 20, "historical": 10, "scenario": 10})
    >>> result = sensemble.extract(root / "archive", fit_years=(1, 40), early_years=(1, 10), late_years=(11, 40),
    ...                            bootstrap_samples=100, figures=False)
    >>> result.table[["model", "member"]].values.tolist()
    [['Alder-2', 'r1i1p1f1'], ['Alder-2', 'r2i1p1f1']]
    >>> sorted(result.series["Alder-2", "r1i1p1f1"])
    ['1pctCO2', 'abrupt-4xCO2', 'demo-rise', 'demo-steady', 'piControl']
    >>> float(result.series["Alder-2", "r1i1p1f1"]["abrupt-4xCO2"].tas.isel(year=-1)) > 1.0
    True
    >>> sensemble.extract(root / "archive", drift_order=3)
    Traceback (most recent call last):
    ...
    sensemble.config.schema.ConfigError: extract(): [extraction] drift_order must be one of 1, 2, got 3; the closest valid value is 2
    """
    config = config_from_dict(_settings_for(("extraction",), settings, "extract()"), source="extract()",
                              check_paths=False)
    archive = Path(archive)
    if not (archive.is_dir() or (archive.is_file() and archive.suffix == ".json")):
        what = "is not a folder or a catalogue (.json)" if archive.exists() else "does not exist"
        raise ConfigError(f"extract(): archive {archive} {what} — give the folder that holds the models "
                          "(NetCDF files or Zarr stores) or an ESM catalogue's .json file")
    from sensemble.extractor.pipeline import extract as extract_batch

    folder = tempfile.TemporaryDirectory(prefix="sensemble-") if out is None else None
    out_dir = Path(folder.name if folder is not None else out)
    batch = extract_batch(archive, out_dir, config.extraction, force=force, progress=progress, figures=figures)
    return ExtractionResult(_read_table(out_dir), _read_series(out_dir), list(batch.failures), out_dir, batch,
                            folder)


def _read_table(out_dir: Path) -> "pd.DataFrame":
    import pandas as pd

    from sensemble.contract.table import ALL_COLUMNS, TEXT_COLUMNS

    path = out_dir / "sensitivity.csv"
    if not path.is_file():
        return pd.DataFrame(columns=list(ALL_COLUMNS))
    table = pd.read_csv(path, dtype={c: str for c in TEXT_COLUMNS}, keep_default_na=False,
                        na_values={c: [""] for c in ALL_COLUMNS if c not in TEXT_COLUMNS})
    return table


def _read_series(out_dir: Path) -> dict:
    """{(model, member): {experiment: Dataset}} from the series files, loaded into memory."""
    import netCDF4
    import xarray as xr

    series = {}
    for path in sorted((out_dir / "series").glob("*.nc")):
        with netCDF4.Dataset(path) as handle:
            model, member, groups = handle.getncattr("model"), handle.getncattr("member"), list(handle.groups)
        runs = {}
        for group in groups:
            with xr.open_dataset(path, group=group) as ds:
                runs[group] = ds.load()
        series[model, member] = runs
    return series


def emulate(source: "ExtractionResult | str | os.PathLike", out: str | os.PathLike | None = None, *,
            progress: bool = False, **settings) -> "EmulationResult":
    """Fit the pathway emulator to an extraction, validate it, and predict warming pathways.

    Parameters
    ----------
    source : ExtractionResult, str or path
        What `extract` returned, or the output folder of an extraction (``sensitivity.csv`` and ``series/``).
    out : str or path, optional
        Where ``pathways.csv``/``.nc``, ``crossings.csv``, ``validation.csv``, ``emulator.nc`` and ``figures/``
        go. None: a temporary folder, removed when the call returns (the returned objects hold the results).
    progress : bool
        Print one line per stage.
    **settings
        Keys of the config's ``[emulator]`` and ``[prediction]`` sections (fields of `EmulatorSettings` and
        `PredictionSettings`), e.g. ``scenario="ssp-x"``, ``inputs=("ecs_eff", "tcr")``,
        ``cases=[{"name": "mid", "ecs_eff": 3.0}]``, ``validate=False``; a key of both sections is given with its
        section, ``prediction__random_state=1``.

    Returns
    -------
    EmulationResult
        ``summary`` (printable with `sensemble.emulator.format_summary`), ``prediction`` (``pathways_table()``,
        ``dataset``, ``crossings``), ``validation`` (leave-one-model-out scores, or None), ``emulator`` (the fitted
        `EnsembleEmulator`), ``files``.

    Raises
    ------
    ConfigError
        A setting that is unknown or outside its allowed values, before any file is read.

    Examples
    --------
    >>> import sensemble, tempfile
    >>> root = sensemble.make_demo_archive(tempfile.mkdtemp(), n_models=4, grid=(4, 8),
    ...     years={"control": 60, "abrupt": 40, "onepct": 20, "historical": 10, "scenario": 20})
    >>> extraction = sensemble.extract(root / "archive", fit_years=(1, 40), early_years=(1, 10),
    ...     late_years=(11, 40), bootstrap_samples=100, figures=False)
    >>> result = sensemble.emulate(extraction, scenario="demo-rise", cases=[{"name": "mid", "ecs_eff": 3.0}],
    ...                            validate=False, figures=False)
    >>> pathways = result.prediction.pathways_table()
    >>> sorted(set(pathways["case"]))
    ['mid']
    >>> bool((pathways["q95"] >= pathways["q05"]).all())
    True
    >>> sensemble.emulate(extraction, smoothing="gausian")
    Traceback (most recent call last):
    ...
    sensemble.config.schema.ConfigError: emulate(): [emulator] smoothing must be one of "auto", "response", "gaussian", "none", got "gausian"; the closest valid value is "gaussian"
    """
    config = config_from_dict(_settings_for(("emulator", "prediction"), settings, "emulate()"), source="emulate()",
                              check_paths=True)
    source_dir = Path(source.out if isinstance(source, ExtractionResult) else source)
    if not (source_dir / "sensitivity.csv").is_file():
        raise ConfigError(f"emulate(): {source_dir} holds no sensitivity.csv — give what extract() returned or "
                          "its output folder")
    from sensemble.emulator.run import emulate as emulate_run

    say = print if progress else None
    if out is not None:
        return emulate_run(source_dir, Path(out), config.emulator, config.prediction, progress=say)
    with tempfile.TemporaryDirectory(prefix="sensemble-") as folder:
        return emulate_run(source_dir, Path(folder), config.emulator, config.prediction, progress=say)


def make_demo_archive(root: str | os.PathLike, *, n_models: int = 8, seed: int = 0, grid=None,
                      years: dict | None = None, progress: bool = False) -> Path:
    """Write an archive of invented models with known truth (CMIP-style NetCDF), for trying the tool out.

    Parameters
    ----------
    root : str or path
        Folder to write into; gets ``archive/`` (CMIP data-reference-syntax folders), ``truth.csv`` (the true
        parameters of each invented model) and ``scenario_forcing.csv``.
    n_models : int
        Number of invented models.
    seed : int
        The ensemble is a deterministic function of (seed, n_models, grid, years).
    grid : tuple of int or str, optional
        (nlat, nlon) of the latitude–longitude grid, or "NLATxNLON"; None: the demo's default.
    years : dict, optional
        Run lengths by role, e.g. ``{"control": 250, "abrupt": 150, "onepct": 150, "historical": 100,
        "scenario": 60}``; roles left out keep their default.
    progress : bool
        Print one line per model.

    Returns
    -------
    pathlib.Path
        ``root``; the files are under ``root / "archive"``.

    Examples
    --------
    >>> import sensemble, tempfile
    >>> root = sensemble.make_demo_archive(tempfile.mkdtemp(), n_models=2, grid=(4, 8),
    ...     years={"control": 30, "abrupt": 20, "onepct": 20, "historical": 10, "scenario": 5})
    >>> sorted(p.name for p in (root / "archive").iterdir() if not p.name.startswith("."))
    ['Alder-2', 'Bramble-1-1']
    >>> (root / "truth.csv").is_file()
    True
    """
    from sensemble.demo import DEFAULT_GRID, generate

    return generate(Path(root), n_models=n_models, seed=seed, grid=DEFAULT_GRID if grid is None else grid,
                    years=years, progress=progress)

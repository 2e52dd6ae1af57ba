"""Saving and loading a fitted `PathwayEmulator` as NetCDF — no pickle.

The file holds the training data, the constructor parameters, the learned arrays (standardisation,
components, scores, basis error) and each GP's fitted correlation parameters (log-scale `theta`).
Loading refits each GP with the optimiser switched off at those hyperparameters on the same arrays,
which reproduces the original predictions bit for bit. A SHA-256 checksum over every variable and
attribute, and a format version, make a tampered or incompatible file fail with a clear message.
"""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import xarray as xr

from sensemble.contract.cf import CONVENTIONS, TEMPERATURE_DIFFERENCE, history_line

from sensemble.contract.atomic import atomic_path, local_writes
from .errors import EmulatorInputError
from .gp import PathwayEmulator
from .physics_mean import PhysicsMean

__all__ = ["save_emulator", "load_emulator", "FORMAT", "FORMAT_VERSION"]

FORMAT = "sensemble-pathway-emulator"
FORMAT_VERSION = 3  # 3: Student-t component GPs at MAP correlation parameters, leave-one-out basis error
_ARRAYS = {  # attribute → (dims, long name)
    "X_train_": (("run", "input"), "training inputs, one row per training run"),
    "Y_train_": (("run", "year"), "training warming pathways, one row per training run"),
    "x_mean_": (("input",), "mean of each input, for standardisation"),
    "x_scale_": (("input",), "scale of each input, for standardisation"),
    "residual_mean_": (("year",), "ensemble mean of the residuals from the physics mean"),
    "components_": (("component", "year"), "principal components of the residuals (kept)"),
    "scores_": (("run", "component"), "scores of the training runs on the kept components"),
    "explained_variance_ratio_": (("component",), "share of the residual variance of each kept component"),
    "basis_error_": (("run", "year"), "leave-one-model-out residual outside the kept components, over sqrt(n)"),
    "truncation_variance_": (("year",), "variance of the basis error (outside the kept components)"),
}
# warming and its residuals are temperature differences (CF §3.1.2 units_metadata)
_UNITS = {"Y_train_": {"units": "K", "units_metadata": TEMPERATURE_DIFFERENCE},
          "residual_mean_": {"units": "K", "units_metadata": TEMPERATURE_DIFFERENCE},
          "basis_error_": {"units": "K", "units_metadata": TEMPERATURE_DIFFERENCE},
          "truncation_variance_": {"units": "K2"}, "forcing": {"units": "W m-2"}}


def _checksum(ds: xr.Dataset) -> str:
    h = hashlib.sha256()
    attrs = {k: v for k, v in ds.attrs.items() if k != "checksum_sha256"}
    h.update(json.dumps({k: str(v) for k, v in attrs.items()}, sort_keys=True).encode())
    for name in sorted(ds.variables):
        values = np.ascontiguousarray(ds[name].values)
        h.update(name.encode())
        h.update(str(values.dtype.str).encode())
        h.update(str(values.shape).encode())
        h.update(values.tobytes())
    return h.hexdigest()


def save_emulator(emulator: PathwayEmulator, path, metadata: dict | None = None) -> Path:
    """Write a fitted emulator to `path` (NetCDF, atomically). `metadata`: JSON-serialisable extras
    (e.g. scenario, run labels, settings) returned again by `load_emulator`."""
    emulator._check_fitted()
    data = {name: (dims, np.asarray(getattr(emulator, name), float), {"long_name": long_name})
            for name, (dims, long_name) in _ARRAYS.items()}
    points = max(len(gp.weights_) for gp in emulator.gps_)
    thetas = np.full((emulator.n_components_, points, emulator.gps_[0].thetas_.shape[1]), np.nan)
    weights = np.zeros((emulator.n_components_, points))
    for j, gp in enumerate(emulator.gps_):
        thetas[j, : len(gp.weights_)] = gp.thetas_
        weights[j, : len(gp.weights_)] = gp.weights_
    data["kernel_theta"] = (("component", "point", "theta"), thetas,
                            {"long_name": "posterior points of each component's correlation parameters: ln length "
                                          "scale per input, then ln nugget"})
    data["kernel_weight"] = (("component", "point"), weights,
                             {"long_name": "posterior weight of each point of kernel_theta"})
    mm = emulator.mean_model_
    if mm.forcing is not None:
        data["forcing"] = (("year",), np.asarray(mm.forcing, float), {"long_name": "effective radiative forcing of "
                                                                     "the scenario used by the physics mean"})
    ds = xr.Dataset(data)
    for name, attrs in _UNITS.items():
        if name in ds:
            ds[name].attrs.update(attrs)
    ds.attrs = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "title": "fitted pathway emulator",
        "Conventions": CONVENTIONS,
        "history": history_line("sensemble emulate: fitted pathway emulator"),
        "parameters": json.dumps(_jsonable(emulator.get_params())),
        "mean_model": json.dumps({k: getattr(mm, k) for k in ("n_years", "f2x", "heat_capacity", "deep_heat_capacity",
                                                              "exchange", "efficacy", "ecs_index",
                                                              "forcing_ratio", "fit_years")}),
        "internal_variability": json.dumps(emulator.internal_variability_),
        "metadata": json.dumps(_jsonable(metadata or {})),
    }
    ds.attrs["checksum_sha256"] = _checksum(ds)
    path = Path(path)
    with atomic_path(path) as tmp, local_writes():
        ds.to_netcdf(tmp, engine="netcdf4")
    return path


def _jsonable(value):
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist())
    if isinstance(value, np.generic):
        return value.item()
    return value


def load_emulator(path) -> tuple[PathwayEmulator, dict]:
    """Read a file written by `save_emulator`; returns (emulator, metadata). Refuses foreign, newer,
    or altered files."""
    path = Path(path)
    if not path.exists():
        raise EmulatorInputError("no such emulator file", path=path)
    try:
        with xr.open_dataset(path, engine="netcdf4") as opened:
            ds = opened.load()
    except (OSError, ValueError) as exc:
        raise EmulatorInputError(f"not a readable NetCDF file ({exc})", path=path) from None
    if ds.attrs.get("format") != FORMAT:
        raise EmulatorInputError("not a saved pathway emulator", path=path)
    version = int(ds.attrs.get("format_version", -1))
    if version != FORMAT_VERSION:
        raise EmulatorInputError(f"format version {version}, this sensemble reads version {FORMAT_VERSION}",
                                 path=path, hint="refit the emulator with this version")
    if ds.attrs.get("checksum_sha256") != _checksum(ds):
        raise EmulatorInputError("checksum mismatch: the file was altered or damaged after it was written",
                                 path=path, hint="refit the emulator")
    params = json.loads(ds.attrs["parameters"])
    params["inputs"] = tuple(params["inputs"])
    if params.get("internal_variability") is not None:
        params["internal_variability"] = tuple(params["internal_variability"])
    em = PathwayEmulator(**params)
    for name in _ARRAYS:
        setattr(em, name, ds[name].values.astype(float))
    mm = json.loads(ds.attrs["mean_model"])
    forcing = ds["forcing"].values.astype(float) if "forcing" in ds else None
    mm["fit_years"] = tuple(mm["fit_years"])
    em.mean_model_ = PhysicsMean(forcing=forcing, **mm)
    iv = json.loads(ds.attrs["internal_variability"])
    em.internal_variability_ = None if iv is None else (float(iv[0]), float(iv[1]))
    em.n_components_ = em.components_.shape[0]
    em.fit_warnings_ = []
    em._set_smoother()
    em._set_internal_variance()
    Xs = em._standardise(em.X_train_)
    theta, weight = ds["kernel_theta"].values, ds["kernel_weight"].values
    em.gps_ = [em._component_gp().fit(Xs, em.scores_[:, j], thetas=theta[j][weight[j] > 0], weights=weight[j][weight[j] > 0])
               for j in range(em.n_components_)]
    return em, json.loads(ds.attrs["metadata"])

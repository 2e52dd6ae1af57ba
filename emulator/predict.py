"""Predictions of the fitted emulator for cases: a point in input space, a grid, or a distribution of inputs.

Per case and year: mean, sd and quantiles (default 5/17/50/83/95 %). For a point the quantiles are the
emulator's own (`quantiles`: from its Student-t predictive); for a distribution of inputs the pathways are
sampled (one per input sample) and mean, sd and quantiles are the sample's, and the quantiles the input samples
achieved are reported beside the ones asked for (`Prediction.input_quantiles`).
Threshold crossings come from sampled pathways: the crossing year is when the centred `crossing_window`-year
running mean reaches the threshold (20-year means as in the IPCC AR6 practice, from memory; the dating
convention is `crossing_years`'s); the probability is the share of sampled pathways crossing within the scenario's horizon,
and a year quantile that falls among non-crossing pathways is left empty (not reached).
A case outside the training inputs' range is flagged `extrapolated`.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr
from scipy.stats import norm

from sensemble.contract.flags import EXTRAPOLATED

from .errors import EmulatorInputError

__all__ = ["Case", "point_case", "lognormal_case", "lognormal_samples", "likely_range_quantiles", "samples_file_case",
           "grid_cases", "default_cases", "case_from_mapping", "prediction_cases", "parse_point", "parse_distribution",
           "predict_cases", "Prediction", "crossing_years"]

LIKELY = (0.17, 0.83)  # the "likely" range as the 17–83 % quantiles
INPUT_QUANTILE_COLUMNS = ["case", "input", "n_samples", "requested_q17", "requested_q50", "requested_q83",
                          "achieved_q17", "achieved_q50", "achieved_q83"]


@dataclass(frozen=True)
class Case:
    """One prediction case: `values` (a point) or `samples` (n, n_inputs) of the inputs (a distribution)."""

    name: str
    values: dict | None = None
    samples: np.ndarray | None = None
    description: str = ""
    requested: dict | None = None  # for a distribution through given quantiles: {input, q17, q50, q83}

    @property
    def is_point(self) -> bool:
        return self.samples is None


def _fmt(v: float) -> str:
    return f"{v:.3g}"


def point_case(values: dict, name: str | None = None) -> Case:
    values = {k: float(v) for k, v in values.items()}
    return Case(name or ",".join(f"{k}={_fmt(v)}" for k, v in values.items()), values=values)


def parse_point(text: str) -> dict:
    """'ecs_eff=3.7' or 'ecs_eff=3.7,tcr=1.8' → {'ecs_eff': 3.7, 'tcr': 1.8}."""
    out = {}
    for part in filter(None, (p.strip() for p in text.split(","))):
        name, sep, value = part.partition("=")
        try:
            if not sep:
                raise ValueError
            out[name.strip()] = float(value)
        except ValueError:
            raise EmulatorInputError(f"cannot read {part!r} as NAME=VALUE (e.g. ecs_eff=3.7)") from None
    return out


def parse_distribution(text: str) -> dict:
    """A distribution case mapping from command-line text (for `PredictionSettings.cases`).

    'ecs_eff=3.0:2.5-4.0' → lognormal with median 3.0 and likely (17–83 %) range 2.5–4.0;
    a path to an existing CSV file → its rows are the input samples.
    """
    text = text.strip()
    if Path(text).suffix.lower() == ".csv":
        return {"samples_file": text}
    name, sep, rest = text.partition("=")
    median, sep2, likely = rest.partition(":")
    lo, sep3, hi = likely.partition("-")
    try:
        if not (sep and sep2 and sep3):
            raise ValueError
        return {"name": f"{name.strip()}~lognormal({median}:{lo}-{hi})", "distribution": "lognormal",
                "input": name.strip(), "median": float(median), "likely": [float(lo), float(hi)]}
    except ValueError:
        raise EmulatorInputError(f"cannot read {text!r} as NAME=MEDIAN:LOW-HIGH (e.g. ecs_eff=3.0:2.5-4.0) "
                                 "or a CSV file of samples") from None


def likely_range_quantiles(median: float, likely: tuple[float, float], probabilities) -> np.ndarray:
    """Quantiles of the two-piece lognormal through a median and a likely (17–83 %) range.

    ln x = ln median + s·z, z standard normal, with s = (ln median − ln lo)/z_0.83 below the median and
    s = (ln hi − ln median)/z_0.83 above it: each half is half of a lognormal of its own width, so the median
    and both ends of the range are matched exactly, an asymmetric range included (a split normal in log space
    with equal halves' probabilities; with a range symmetric in log it is the plain lognormal).
    """
    lo, hi = float(likely[0]), float(likely[1])
    if not 0 < lo < median < hi:
        raise EmulatorInputError(f"likely range ({lo}, {hi}) must bracket the median {median} with positive values")
    z = norm.ppf(np.asarray(probabilities, float))
    z83 = norm.ppf(LIKELY[1])
    width = np.where(z < 0, (np.log(median) - np.log(lo)) / z83, (np.log(hi) - np.log(median)) / z83)
    return np.exp(np.log(median) + width * z)


def lognormal_samples(median: float, likely: tuple[float, float], n: int, rng) -> np.ndarray:
    """Samples of the two-piece lognormal through a median and a likely (17–83 %) range
    (`likely_range_quantiles`), by inverting its quantile function at uniform draws."""
    likely_range_quantiles(median, likely, [0.5])  # validates the range
    return likely_range_quantiles(median, likely, rng.uniform(size=int(n)))


def lognormal_case(input_name: str, median: float, likely, inputs, n_samples: int, rng, fixed: dict | None = None,
                   name: str | None = None) -> Case:
    """A distribution case: `input_name` lognormal, the other inputs held at `fixed` values."""
    fixed = dict(fixed or {})
    cols = []
    for col in inputs:
        if col == input_name:
            cols.append(lognormal_samples(median, likely, n_samples, rng))
        elif col in fixed:
            cols.append(np.full(int(n_samples), float(fixed[col])))
        else:
            raise EmulatorInputError(f"distribution case needs a value for input {col!r}")
    name = name or f"{input_name}~lognormal({_fmt(median)};{_fmt(likely[0])}-{_fmt(likely[1])})"
    return Case(name, samples=np.column_stack(cols),
                description=f"two-piece lognormal of {input_name}, median {median}, likely {likely[0]}–{likely[1]}",
                requested={"input": input_name, "q17": float(likely[0]), "q50": float(median), "q83": float(likely[1])})


def samples_file_case(path, inputs, name: str | None = None) -> Case:
    """A distribution case from a CSV file with one column per input, one row per sample."""
    path = Path(path)
    if not path.exists():
        raise EmulatorInputError("no such samples file", path=path)
    frame = pd.read_csv(path)
    missing = [c for c in inputs if c not in frame.columns]
    if missing:
        raise EmulatorInputError(f"no column(s) {', '.join(missing)} (columns: {', '.join(frame.columns)})", path=path)
    values = frame[list(inputs)].to_numpy(float)
    if len(values) < 2 or not np.all(np.isfinite(values)):
        raise EmulatorInputError("samples must be at least 2 finite rows", path=path)
    return Case(name or path.stem, samples=values, description=f"{len(values)} samples from {path.name}")


def grid_cases(grid: dict) -> list[Case]:
    """Every combination of the listed values: {'ecs_eff': [2, 3, 4]} → three point cases."""
    names = list(grid)
    return [point_case(dict(zip(names, combo))) for combo in itertools.product(*(grid[n] for n in names))]


def default_cases(X, models, inputs) -> list[Case]:
    """Midpoints between neighbouring models (each model at the mean of its runs, ordered by the first input),
    and one case beyond the largest, by a tenth of the range (it will be flagged `extrapolated`)."""
    X = np.asarray(X, float)
    models = np.asarray(models)
    per_model = np.array([X[models == m].mean(axis=0) for m in dict.fromkeys(models)])
    per_model = per_model[np.argsort(per_model[:, 0])]
    cases = [point_case(dict(zip(inputs, np.round((a + b) / 2, 3)))) for a, b in zip(per_model[:-1], per_model[1:])]
    beyond = per_model[-1].copy()
    beyond[0] = per_model[-1, 0] + 0.1 * (per_model[-1, 0] - per_model[0, 0])
    cases.append(point_case(dict(zip(inputs, np.round(beyond, 3)))))
    return cases


def case_from_mapping(spec: dict, inputs, n_samples: int, rng) -> Case:
    """A case from a config mapping: {'name', <input>: value …} (point); {'distribution': 'lognormal',
    'input', 'median', 'likely': [lo, hi], <other inputs>} ; or {'samples_file': path}."""
    spec = dict(spec)
    name = spec.pop("name", None)
    # the config's form: <input> = {distribution = "lognormal", median = …, likely = [lo, hi]}
    nested = [k for k, v in spec.items() if isinstance(v, dict)]
    if len(nested) > 1:
        raise EmulatorInputError(f"case {name!r}: only one input may be a distribution, got {', '.join(nested)}")
    if nested:
        key = nested[0]
        spec.update(spec.pop(key), input=key)
    if "samples_file" in spec:
        return samples_file_case(spec["samples_file"], inputs, name)
    if "distribution" in spec:
        kind = spec.pop("distribution")
        if kind != "lognormal":
            raise EmulatorInputError(f"unknown distribution {kind!r}; use 'lognormal' or a samples_file")
        try:
            return lognormal_case(spec.pop("input", inputs[0]), float(spec.pop("median")), spec.pop("likely"),
                                  inputs, n_samples, rng, fixed=spec, name=name)
        except KeyError as exc:
            raise EmulatorInputError(f"lognormal case needs {exc.args[0]!r}") from None
    return point_case(spec, name)


def prediction_cases(prediction, X, models, inputs, rng) -> list[Case]:
    """The cases a `PredictionSettings` asks for: its cases and grid, and the ensemble's own gaps
    (`default_cases`) when there are no others or `include_default_cases`; names must not repeat."""
    cases = [case_from_mapping(spec, inputs, prediction.n_samples, rng) for spec in prediction.cases]
    if prediction.grid:
        cases += grid_cases(prediction.grid)
    if not cases or prediction.include_default_cases:
        cases = default_cases(X, models, inputs) + cases
    names = [c.name for c in cases]
    if len(set(names)) != len(names):
        raise EmulatorInputError(f"case names repeat: {', '.join(sorted({n for n in names if names.count(n) > 1}))}")
    return cases


def crossing_years(paths, years, threshold: float, window: int = 20):
    """Crossing year per sampled pathway (NaN if never), fractional.

    Convention: year k labels the annual mean of year k; a `window`-year running mean is dated at its centre,
    years[s] + (window − 1)/2; the crossing is the date at which the running mean reaches the threshold,
    interpolated linearly between the first window at or above it and the one before (the first window's
    centre when it is already above). A straight line whose annual values reach the threshold at 50.5 (halfway
    between years 50 and 51) is dated 50.5 with any window: the running mean of a line is the line at its centre.
    """
    paths = np.asarray(paths, float)
    years = np.asarray(years, float)
    window = int(max(1, min(window, paths.shape[-1])))
    csum = np.cumsum(paths, axis=-1)
    running = csum[..., window - 1:].copy()
    running[..., 1:] -= csum[..., :-window]
    running /= window
    centres = years[: running.shape[-1]] + (window - 1) / 2.0
    hit = running >= threshold
    crossed = hit.any(axis=-1)
    first = hit.argmax(axis=-1)
    before = np.maximum(first - 1, 0)
    after_value = np.take_along_axis(running, first[..., None], -1)[..., 0]
    before_value = np.take_along_axis(running, before[..., None], -1)[..., 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        fraction = np.where(first > 0, (threshold - before_value) / (after_value - before_value), 1.0)
    out = centres[before] + np.clip(fraction, 0.0, 1.0) * (centres[first] - centres[before])
    out[~crossed] = np.nan
    return out


@dataclass
class Prediction:
    """Results per case: `dataset` (case, year, quantile) and `crossings` (case, threshold, …)."""

    dataset: xr.Dataset
    crossings: pd.DataFrame
    samples: dict = field(default_factory=dict)
    #: per distribution case through given quantiles: the 17/50/83 % asked for and achieved by the input samples
    input_quantiles: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=INPUT_QUANTILE_COLUMNS))

    def pathways_table(self) -> pd.DataFrame:
        """`pathways.csv`: case, <inputs…>, year, mean, sd, q05 … q95, flags (then calendar_year if known)."""
        ds = self.dataset
        inputs = list(ds.attrs["inputs"].split(";"))
        rows = []
        qnames = [f"q{int(round(q * 100)):02d}" for q in ds["quantile"].values]
        for c, case in enumerate(ds["case"].values):
            frame = pd.DataFrame(index=range(ds.sizes["year"]))
            frame["case"] = case
            for name in inputs:
                frame[name] = float(ds[name].values[c])
            frame["year"] = ds["year"].values
            frame["mean"] = ds["mean"].values[c]
            frame["sd"] = ds["sd"].values[c]
            for q, qn in enumerate(qnames):
                frame[qn] = ds["warming_quantile"].values[c, q]
            frame["flags"] = ds["flags"].values[c]
            if "calendar_year" in ds.coords:
                frame["calendar_year"] = ds["calendar_year"].values
            rows.append(frame)
        return pd.concat(rows, ignore_index=True)


def predict_cases(emulator, cases, *, training_X, years, calendar_years=None, thresholds=(1.5, 2.0),
                  quantiles=(0.05, 0.17, 0.50, 0.83, 0.95), n_samples: int = 2000, crossing_window: int = 20,
                  random_state=0, keep_samples: bool = False) -> Prediction:
    """Predict every case; see the module docstring for what is computed and how."""
    inputs = list(emulator.inputs)
    training_X = np.asarray(training_X, float)
    lo, hi = training_X.min(axis=0), training_X.max(axis=0)
    rng = np.random.default_rng(random_state)
    quantiles = np.asarray(quantiles, float)
    z = norm.ppf(quantiles)
    years = np.asarray(years)
    if not cases:
        raise EmulatorInputError("no prediction cases")
    n_years = len(years)
    names, means, sds, qs, flags, input_values, cross_rows, kept, input_rows = [], [], [], [], [], [], [], {}, []
    for case in cases:
        if case.is_point:
            missing = [c for c in inputs if c not in case.values]
            extra = [c for c in case.values if c not in inputs]
            if missing or extra:
                raise EmulatorInputError(f"case {case.name!r}: "
                                         + (f"missing input(s) {', '.join(missing)}" if missing else "")
                                         + ("; " if missing and extra else "")
                                         + (f"unknown input(s) {', '.join(extra)} (emulator inputs: {', '.join(inputs)})" if extra else ""))
            x = np.array([[case.values[c] for c in inputs]])
            paths = emulator.sample_paths(x, n_samples, random_state=rng)[0]
            if getattr(emulator, "sampled_quantiles", False):
                # a predictive distribution that is not Gaussian (the parameter route): the samples' own
                mean, sd = paths.mean(axis=0), paths.std(axis=0, ddof=1)
                q = np.quantile(paths, quantiles, axis=0)
            else:
                mean, sd = emulator.predict(x, return_std=True)
                mean, sd = mean[0], sd[0]
                q = emulator.quantiles(x, quantiles)[0] if hasattr(emulator, "quantiles") else \
                    mean[None, :] + z[:, None] * sd[None, :]
            outside = np.any((x < lo) | (x > hi))
            flag = EXTRAPOLATED if outside else ""
            shown = x[0]
        else:
            xs = np.asarray(case.samples, float)
            if xs.shape[1] != len(inputs):
                raise EmulatorInputError(f"case {case.name!r}: samples have {xs.shape[1]} columns for inputs {inputs}")
            paths = emulator.sample_paths(xs, 1, random_state=rng)[:, 0, :]
            mean, sd = paths.mean(axis=0), paths.std(axis=0, ddof=1)
            q = np.quantile(paths, quantiles, axis=0)
            share = float(np.mean(np.any((xs < lo) | (xs > hi), axis=1)))
            flag = f"extrapolated_share={share:.2f}" if share > 0 else ""
            shown = np.median(xs, axis=0)
            if case.requested:
                achieved = np.quantile(xs[:, inputs.index(case.requested["input"])], [LIKELY[0], 0.5, LIKELY[1]])
                input_rows.append([case.name, case.requested["input"], len(xs),
                                   *(case.requested[k] for k in ("q17", "q50", "q83")), *achieved])
        names.append(case.name)
        means.append(mean)
        sds.append(sd)
        qs.append(q)
        flags.append(flag)
        input_values.append(shown)
        if keep_samples:
            kept[case.name] = paths
        for threshold in thresholds:
            cy = crossing_years(paths, years, threshold, crossing_window)
            sortable = np.where(np.isnan(cy), np.inf, cy)
            yq = np.quantile(sortable, [0.05, 0.5, 0.95], method="inverted_cdf")
            row = {"case": case.name, "threshold": float(threshold),
                   **{f"year_{k}": (v if np.isfinite(v) else np.nan) for k, v in zip(("q05", "q50", "q95"), yq)},
                   "probability": float(np.mean(np.isfinite(cy)))}
            if calendar_years is not None:
                offset = int(calendar_years[0]) - int(years[0])
                for k in ("q05", "q50", "q95"):
                    row[f"calendar_year_{k}"] = row[f"year_{k}"] + offset
            cross_rows.append(row)
    input_values = np.array(input_values)
    ds = xr.Dataset(
        {
            "mean": (("case", "year"), np.array(means), {"units": "K", "long_name": "emulated warming, mean"}),
            "sd": (("case", "year"), np.array(sds), {"units": "K", "long_name": "emulated warming, standard deviation"}),
            "warming_quantile": (("case", "quantile", "year"), np.array(qs),
                                 {"units": "K", "long_name": "emulated warming, quantiles"}),
            "flags": (("case",), np.array(flags, dtype=object), {"long_name": "quality flags, ';'-separated"}),
            **{name: (("case",), input_values[:, j], {"long_name": f"input {name} (median for distributions)"})
               for j, name in enumerate(inputs)},
        },
        coords={"case": np.array(names, dtype=object), "year": ("year", years, {"long_name": "year after branch (1 = first)"}),
                "quantile": ("quantile", quantiles, {"long_name": "probability level"})},
        attrs={"inputs": ";".join(inputs), "n_samples": int(n_samples), "crossing_window": int(crossing_window),
               "prediction_of": getattr(emulator, "prediction_target_", "")},
    )
    if calendar_years is not None:
        ds = ds.assign_coords(calendar_year=("year", np.asarray(calendar_years), {"long_name": "calendar year"}))
    crossings = pd.DataFrame(cross_rows)
    return Prediction(ds, crossings, kept, pd.DataFrame(input_rows, columns=INPUT_QUANTILE_COLUMNS))

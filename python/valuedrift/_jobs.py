"""The commands of the ``valuedrift`` program, called in this process with data frames in and out.

Each function builds the command line the program would be given and runs it through the same
code (``valuedrift._native.run``), so every option check, computation and message is the command
line's. A trial table given as a data frame is written as Parquet (Arrow underneath) into a
private work folder and read by the command's own reader; messages name it by ``data_name``
instead of that file. Result tables come from the Parquet twins of the files the command writes,
so their columns are those of the files.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path
from typing import Any, Iterable, Mapping, Optional, Sequence, Union

from . import _frames
from ._native import ValuedriftError
from ._native import run as _run_native

PathLike = Union[str, "os.PathLike[str]"]


def _is_path(value: Any) -> bool:
    return isinstance(value, (str, os.PathLike))


class Results:
    """A folder written by one command, with its tables as data frames.

    ``tables`` maps each table's name (the file name without extension, e.g. ``"parameters"``
    for parameters.csv) to a data frame read from its Parquet twin; ``record`` is the command's
    run record (run.json or plan.json) when it wrote one. A folder made in a private work folder
    (no ``out`` given) lasts as long as this object.
    """

    def __init__(self, folder: Path, frame: str, work: Optional[tempfile.TemporaryDirectory] = None):
        self.folder = Path(folder)
        self.frame = frame
        self._work = work
        self.tables: dict[str, Any] = {
            p.stem: _frames.read_parquet(p, frame) for p in sorted(self.folder.glob("*.parquet"))
        }
        self.record: Optional[dict] = None
        for name in ("run.json", "plan.json"):
            if (self.folder / name).is_file():
                self.record = json.loads((self.folder / name).read_text(encoding="utf-8"))
                break

    def __getitem__(self, name: str) -> Any:
        try:
            return self.tables[name]
        except KeyError:
            raise KeyError(
                f"{name}: no such table in {self.folder} (tables: {', '.join(self.tables)})"
            ) from None

    def __contains__(self, name: str) -> bool:
        return name in self.tables

    def __repr__(self) -> str:
        return f"{type(self).__name__}({str(self.folder)!r}, tables={list(self.tables)})"


class Fit(Results):
    """What :func:`fit` wrote: the tables of the fit folder, and what :func:`check`,
    :func:`export`, :func:`compare` and :func:`contrast` need to go on from it (the trial table
    the fit read, its models and its reading options)."""

    def __init__(self, folder: Path, frame: str, work, trials: Path, names: dict[str, str],
                 models: list[str], reading: list[str]):
        super().__init__(folder, frame, work)
        #: The trial table the fit read (the Parquet file a frame was written to).
        self.trials = trials
        #: The models as given to the command (names or files).
        self.models = models
        self._names = names
        self._reading = reading

    @property
    def parameters(self) -> Any:
        """One row per subject, model and parameter (parameters.csv)."""
        return self["parameters"]

    @property
    def summary(self) -> Any:
        """One row per subject and model with the fit's status (fit_summary.csv)."""
        return self["fit_summary"]

    @property
    def estimates(self) -> Any:
        """One row per subject and model, one column per parameter (estimates_wide.csv)."""
        return self["estimates_wide"]


class _Progress:
    """Shows the command's progress: a tqdm bar (tqdm.auto, so also in a notebook) when tqdm is
    installed, else one line rewritten in place."""

    def __init__(self) -> None:
        try:
            from tqdm.auto import tqdm
        except ImportError:
            tqdm = None
        self._tqdm = tqdm
        self._bar = None
        self._what: Optional[str] = None
        self._line = False

    def __call__(self, what: str, done: int, total: int) -> None:
        if self._tqdm is not None:
            if self._bar is None or what != self._what:
                self.close()
                self._bar = self._tqdm(total=total, desc=what)
            self._bar.n = done
            self._bar.refresh()
        else:
            percent = 100.0 * done / total if total else 100.0
            print(f"\r{what} {done}/{total} ({percent:.0f} %)", end="", flush=True)
            self._line = True
        self._what = what

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
            self._bar = None
        if self._line:
            print(flush=True)
            self._line = False


def _run(args: list[str], progress: bool, names: Mapping[str, str]) -> None:
    """Runs one command line; messages name the files in ``names`` by their given names."""
    shown = _Progress() if progress else None
    try:
        _run_native([str(a) for a in args], shown)
    except ValuedriftError as error:
        text = str(error)
        for path, name in names.items():
            text = text.replace(path, name)
        raise ValuedriftError(text) from None
    finally:
        if shown is not None:
            shown.close()


def _work() -> tempfile.TemporaryDirectory:
    return tempfile.TemporaryDirectory(prefix="valuedrift-")


def _pairs(mapping: Optional[Mapping[str, str]]) -> str:
    return ",".join(f"{k}={v}" for k, v in (mapping or {}).items())


def _reading(columns: Optional[Mapping[str, str]], choice_codes: Optional[Mapping[str, str]],
             missing: Optional[Iterable[str]]) -> list[str]:
    args = []
    if columns:
        args += ["--columns", _pairs(columns)]
    if choice_codes:
        args += ["--choice-codes", _pairs(choice_codes)]
    if missing:
        args += ["--missing", ",".join(missing)]
    return args


def _optional(option: str, value: Any) -> list[str]:
    return [] if value is None else [option, repr(value) if isinstance(value, float) else str(value)]


def _table_input(value: Any, work: Path, stem: str, data_name: str) -> tuple[Path, dict[str, str]]:
    """A trial table given as a path (used as it is) or a data frame (written as Parquet in the
    work folder); with the names its messages should use."""
    if _is_path(value):
        return Path(value), {}
    path = _frames.write_parquet(value, work / f"{stem}.parquet", data_name)
    return path, {str(path): data_name}


def _model_inputs(models: Union[str, Sequence[str]], work: Path) -> tuple[list[str], dict[str, str]]:
    """Model names, files, or TOML texts (anything with a line break or an ``=``), the texts
    written to files in the work folder."""
    if isinstance(models, str):
        models = [models]
    names: list[str] = []
    renamed: dict[str, str] = {}
    for k, model in enumerate(models):
        model = os.fspath(model)
        if "\n" in model or "=" in model:
            folder = work / "models"
            folder.mkdir(exist_ok=True)
            path = folder / f"model-{k + 1}.toml"
            path.write_text(model, encoding="utf-8")
            names.append(str(path))
            renamed[str(path)] = f"model text {k + 1}"
        else:
            names.append(model)
    return names, renamed


def _out(out: Optional[PathLike], work: tempfile.TemporaryDirectory, name: str,
         replace: bool) -> tuple[Path, list[str]]:
    if out is None:
        return Path(work.name) / name, []
    return Path(out), (["--replace"] if replace else [])


def fit(
    trials: Any,
    models: Union[str, Sequence[str]],
    *,
    out: Optional[PathLike] = None,
    replace: bool = False,
    hierarchical: bool = False,
    by: Optional[str] = None,
    starts: int = 10,
    seed: int = 1,
    threads: int = 0,
    deadline: Optional[float] = None,
    lock: Optional[float] = None,
    columns: Optional[Mapping[str, str]] = None,
    choice_codes: Optional[Mapping[str, str]] = None,
    missing: Optional[Iterable[str]] = None,
    fast_floor: Optional[float] = None,
    trim_below: Optional[float] = None,
    trim_above: Optional[float] = None,
    responses_per_parameter: Optional[int] = None,
    em_tolerance: Optional[float] = None,
    em_iterations: Optional[int] = None,
    ibic_samples: Optional[int] = None,
    full_covariance: bool = False,
    prior_covariates: Optional[Sequence[str]] = None,
    covariates_as_given: bool = False,
    resume: bool = False,
    restart: bool = False,
    frame: Optional[str] = None,
    data_name: str = "DataFrame",
    progress: bool = True,
) -> Fit:
    """Fits models to each subject of a trial table, as ``valuedrift fit`` does (maximum
    likelihood, or MAP where a model declares priors: quasi-random starts, Halton 1960, then
    L-BFGS, Liu & Nocedal 1989, with exact gradients); with ``hierarchical=True`` also
    empirical-Bayes group priors (EM with the Laplace approximation, Huys et al. 2011), one per
    value of column ``by`` when given.

    ``trials`` is a pandas or polars DataFrame (or a pyarrow Table, or a path to a .csv, .tsv
    or .parquet file) with the columns the README describes; ``models`` are built-in names,
    model files or model TOML texts. Returns a :class:`Fit` whose tables are those of the fit
    folder (parameters, estimates_wide, fit_summary, data_screen, and eb_* with
    ``hierarchical``), as ``frame`` ("pandas" or "polars"; default: the kind of ``trials``,
    pandas for a path). Without ``out`` the folder lives in a private work folder as long as
    the returned object; with ``out`` it is written there (an existing one only with
    ``replace``).

    Runs without holding the GIL; Ctrl-C (or a notebook's interrupt) stops it before the next
    subject (the EM before its next iteration) and writes no result. As on the command line, a
    fit with ``out`` keeps the journal of its finished subjects beside ``out``
    (``.<name>.valuedrift-journal``): ``resume=True`` continues it (the outputs are those of an
    uninterrupted run), ``restart=True`` discards it. Problems raise :class:`ValuedriftError` with the command line's
    message; a trial table given as a frame is named ``data_name`` there, with its 1-based row
    (``row 3`` is ``df.iloc[2]``) and column.

    Parameters are research measurements, not diagnoses.
    """
    kind = _frames.check_kind(frame or _frames.kind_of(trials) or "pandas")
    work = _work()
    path, names = _table_input(trials, Path(work.name), "trials", data_name)
    model_args, model_names = _model_inputs(models, Path(work.name))
    names.update(model_names)
    folder, replace_args = _out(out, work, "fit", replace)
    reading = _reading(columns, choice_codes, missing)
    args = ["fit", "--data", path, "--model", ",".join(model_args), "--out", folder,
            "--starts", starts, "--seed", seed, "--threads", threads, *replace_args, *reading]
    args += _optional("--deadline", deadline) + _optional("--lock", lock)
    args += _optional("--fast-floor", fast_floor) + _optional("--trim-below", trim_below)
    args += _optional("--trim-above", trim_above)
    args += _optional("--responses-per-parameter", responses_per_parameter)
    args += (["--resume"] if resume else []) + (["--restart"] if restart else [])
    if hierarchical:
        args.append("--hierarchical")
        args += _optional("--by", by) + _optional("--em-tolerance", em_tolerance)
        args += _optional("--em-iterations", em_iterations)
        args += _optional("--ibic-samples", ibic_samples)
        if full_covariance:
            args.append("--full-covariance")
        if prior_covariates:
            args += ["--prior-covariates", ",".join(prior_covariates)]
        if covariates_as_given:
            args.append("--covariates-as-given")
    elif by is not None:
        raise ValueError("by: gives each group its own prior, so it needs hierarchical=True")
    _run(args, progress, names)
    return Fit(folder, kind, work, path, names, model_args, reading)


def _fitted(fits: Union[Fit, PathLike]) -> tuple[Path, Optional[Fit]]:
    if isinstance(fits, Fit):
        return fits.folder, fits
    if _is_path(fits):
        return Path(fits), None
    raise TypeError(f"expected a Fit or the path of a fit folder; got {type(fits).__name__}")


def _one_model(fit_: Optional[Fit], model: Optional[str]) -> str:
    if model is not None:
        return model
    if fit_ is not None and len(fit_.models) == 1:
        return fit_.models[0]
    raise ValueError("model: name the model (the fit has several, or its models are unknown)")


def _fitted_run(command: str, fits, model, trials, estimates, out, replace, frame, data_name,
                reading: Optional[list], extra: list, progress: bool) -> Results:
    """``check`` or ``export`` of a fit: the fit's trial table and reading options unless
    given."""
    folder, fit_ = _fitted(fits)
    work = _work()
    names: dict[str, str] = {}
    if trials is None:
        if fit_ is None:
            raise ValueError("trials: give the trial table the fit read (a frame or a path)")
        path = fit_.trials
        names = dict(fit_._names)
    else:
        path, names = _table_input(trials, Path(work.name), "trials", data_name)
    if not reading:
        reading = fit_._reading if fit_ is not None else []
    model_args, model_names = _model_inputs(_one_model(fit_, model), Path(work.name))
    names.update(model_names)
    target, replace_args = _out(out, work, command, replace)
    args = [command, "--fits", folder, "--data", path, "--model", model_args[0], "--out", target,
            "--estimates", estimates, *reading, *replace_args, *extra]
    _run(args, progress, names)
    given = _frames.kind_of(trials) if trials is not None else None
    kind = _frames.check_kind(frame or given or (fit_.frame if fit_ is not None else "pandas"))
    return Results(target, kind, work)


def check(
    fits: Union[Fit, PathLike],
    model: Optional[str] = None,
    *,
    trials: Any = None,
    sims: int = 100,
    seed: int = 1,
    deadline: Optional[float] = None,
    by: Optional[str] = None,
    estimates: str = "per-subject",
    columns: Optional[Mapping[str, str]] = None,
    choice_codes: Optional[Mapping[str, str]] = None,
    missing: Optional[Iterable[str]] = None,
    out: Optional[PathLike] = None,
    replace: bool = False,
    frame: Optional[str] = None,
    data_name: str = "DataFrame",
    progress: bool = True,
) -> Results:
    """Predictive check of a fitted model, as ``valuedrift check``: each subject's data
    simulated ``sims`` times at its estimates and observed against predicted choice proportions
    and response-time quantiles (.1 .3 .5 .7 .9; Ratcliff & Tuerlinckx 2002). Tables
    check_choices, check_quantiles, check_misfit (figures as SVG files in the folder).
    ``trials``, ``columns``, ``choice_codes`` and ``missing`` default to those of a
    :class:`Fit`; give them with the path of a fit folder."""
    extra = ["--sims", sims, "--seed", seed] + _optional("--deadline", deadline) + _optional("--by", by)
    return _fitted_run("check", fits, model, trials, estimates, out, replace, frame, data_name,
                       _reading(columns, choice_codes, missing), extra, progress)


def export(
    fits: Union[Fit, PathLike],
    model: Optional[str] = None,
    *,
    trials: Any = None,
    scale: str = "center",
    tr: Optional[float] = None,
    scans: Optional[int] = None,
    microtime_bins: Optional[int] = None,
    task: str = "choice",
    estimates: str = "per-subject",
    columns: Optional[Mapping[str, str]] = None,
    choice_codes: Optional[Mapping[str, str]] = None,
    missing: Optional[Iterable[str]] = None,
    out: Optional[PathLike] = None,
    replace: bool = False,
    frame: Optional[str] = None,
    data_name: str = "DataFrame",
    progress: bool = True,
) -> Results:
    """Per-trial latent variables of a fitted model for imaging analyses, as ``valuedrift
    export`` (table latents; with onsets in the trial table a BIDS derivative folder of events
    files, and with ``tr`` and ``scans`` design matrices convolved with the canonical
    double-gamma response, Friston et al. 1998; Glover 1999). ``trials``, ``columns``,
    ``choice_codes`` and ``missing`` default to those of a :class:`Fit`; give them with the
    path of a fit folder."""
    extra = ["--scale", scale, "--task", task] + _optional("--tr", tr) + _optional("--scans", scans)
    extra += _optional("--microtime-bins", microtime_bins)
    return _fitted_run("export", fits, model, trials, estimates, out, replace, frame, data_name,
                       _reading(columns, choice_codes, missing), extra, progress)


def compare(
    fits: Union[Fit, PathLike],
    *,
    by: str = "group",
    summary: str = "fit_summary.csv",
    evidence: str = "bic",
    samples: int = 1_000_000,
    seed: int = 1,
    out: Optional[PathLike] = None,
    replace: bool = False,
    frame: Optional[str] = None,
    progress: bool = True,
) -> Results:
    """Compares the models of a fit, as ``valuedrift compare``: per subject AIC (Akaike 1974)
    and BIC (Schwarz 1978) with their weights; random-effects Bayesian model selection (Stephan
    et al. 2009) with protected exceedance probabilities (Rigoux et al. 2014), pooled and per
    group. Tables model_selection, model_evidence, model_group_difference. Without ``out`` they
    go to a private folder (the command line's default is the fit folder)."""
    folder, fit_ = _fitted(fits)
    work = _work()
    target, replace_args = _out(out, work, "compare", replace)
    args = ["compare", "--fits", folder, "--by", by, "--summary", summary, "--evidence", evidence,
            "--samples", samples, "--seed", seed, "--out", target, *replace_args]
    _run(args, progress, {})
    kind = _frames.check_kind(frame or (fit_.frame if fit_ is not None else "pandas"))
    return Results(target, kind, work)


def contrast(
    fits: Union[Fit, PathLike],
    model: Optional[str] = None,
    *,
    by: str = "group",
    estimates: str = "per-subject",
    out: Optional[PathLike] = None,
    replace: bool = False,
    frame: Optional[str] = None,
    progress: bool = True,
) -> Results:
    """Compares one model's parameters between groups of subjects, as ``valuedrift contrast``:
    Welch's t (Welch 1947), Mann-Whitney U, Hedges' g with a 95 % interval (Hedges 1981), and
    with more than two groups Welch's ANOVA (Welch 1951) and Kruskal-Wallis H (Kruskal & Wallis
    1952); Benjamini-Hochberg q values (1995). Tables contrast and contrast_groups. Differences
    between groups are associations in the sample, not diagnoses."""
    folder, fit_ = _fitted(fits)
    work = _work()
    target, replace_args = _out(out, work, "contrast", replace)
    args = ["contrast", "--fits", folder, "--model", _one_model(fit_, model), "--by", by,
            "--estimates", estimates, "--out", target, *replace_args]
    _run(args, progress, {})
    kind = _frames.check_kind(frame or (fit_.frame if fit_ is not None else "pandas"))
    return Results(target, kind, work)


def simulate(
    model: str,
    params: Any,
    design: Any,
    *,
    seed: int = 1,
    deadline: Optional[float] = None,
    lock: Optional[float] = None,
    choice_codes: Optional[Mapping[str, str]] = None,
    missing: Optional[Iterable[str]] = None,
    out: Optional[PathLike] = None,
    replace: bool = False,
    frame: Optional[str] = None,
    progress: bool = True,
) -> Any:
    """Simulates choices, response times and outcomes from a model on a trial design, as
    ``valuedrift simulate`` (exact first-passage sampling, no time discretisation). ``params``:
    one row per subject with a ``subject`` column and one column per free parameter (natural
    scale); ``design``: a trial table whose choice, rt and outcome may be empty, with
    outcome_if_a and outcome_if_b. Both may be frames or paths. Returns the simulated trial
    table as a frame (and writes it to ``out``, .csv or .parquet, when given)."""
    kind = _frames.check_kind(frame or _frames.kind_of(design) or _frames.kind_of(params) or "pandas")
    work = _work()
    here = Path(work.name)
    design_path, names = _table_input(design, here, "design", "design DataFrame")
    if _is_path(params):
        params_path = Path(params)
    else:
        params_path = _frames.write_csv(params, here / "params.csv", "params")
        names[str(params_path)] = "params DataFrame"
    model_args, model_names = _model_inputs(model, here)
    names.update(model_names)
    target = Path(out) if out is not None else here / "simulated.parquet"
    args = ["simulate", "--model", model_args[0], "--params", params_path, "--design", design_path,
            "--out", target, "--seed", seed, *_reading(None, choice_codes, missing)]
    args += _optional("--deadline", deadline) + _optional("--lock", lock)
    if replace and out is not None:
        args.append("--replace")
    _run(args, progress, names)
    if target.suffix.lower() == ".parquet":
        result = _frames.read_parquet(target, kind)
    else:
        import pyarrow.csv as pacsv

        table = pacsv.read_csv(target)
        scratch = here / "simulated-read.parquet"
        _frames.write_parquet(table, scratch, "simulated")
        result = _frames.read_parquet(scratch, kind)
    work.cleanup()
    return result


def plan(
    plan: PathLike,
    *,
    out: Optional[PathLike] = None,
    threads: int = 0,
    replace: bool = False,
    frame: str = "pandas",
    progress: bool = True,
) -> Results:
    """Plans a study before collecting data, as ``valuedrift plan``: parameter recovery, model
    recovery and the power of a group contrast per design size from simulated studies (see the
    README's section on planning). ``plan`` is a plan file, or its TOML text; in a text, give
    the design file as an absolute path (a relative one is read from the work folder). Tables
    plan_recovery, plan_confusion, plan_model_recovery, plan_power, plan_trials_needed,
    plan_estimates."""
    work = _work()
    here = Path(work.name)
    text = os.fspath(plan)
    names: dict[str, str] = {}
    if "\n" in text or "=" in text:
        path = here / "plan.toml"
        path.write_text(text, encoding="utf-8")
        names[str(path)] = "plan text"
    else:
        path = Path(text)
    target, replace_args = _out(out, work, "plan", replace)
    args = ["plan", "--plan", path, "--out", target, "--threads", threads, *replace_args]
    _run(args, progress, names)
    return Results(target, _frames.check_kind(frame), work)


def report(
    fits: Union[Fit, PathLike, None] = None,
    *,
    check: Union[Results, PathLike, None] = None,
    plan: Union[Results, PathLike, None] = None,
    out: Optional[PathLike] = None,
    replace: bool = False,
    progress: bool = True,
) -> str:
    """The self-contained HTML report of ``valuedrift report`` (inline SVG figures, no script)
    of a fit and what sits beside it, a check and a plan; returns its text (in a notebook,
    ``IPython.display.HTML(vd.report(fit))`` shows it) and writes it to ``out`` when given."""
    work = _work()
    target = Path(out) if out is not None else Path(work.name) / "report.html"
    args = ["report", "--out", target]
    for option, given in (("--fits", fits), ("--check", check), ("--plan", plan)):
        if given is not None:
            args += [option, given.folder if isinstance(given, Results) else Path(given)]
    if replace and out is not None:
        args.append("--replace")
    _run(args, progress, {})
    text = target.read_text(encoding="utf-8")
    work.cleanup()
    return text


def models(name: Optional[str] = None, *, frame: str = "pandas") -> Any:
    """The parameters of every built-in model (or of the one named: a built-in name, a model
    file or a model TOML text), one row per model and parameter: model, origin, parameter,
    lower, upper, start_low, start_high, fixed (missing when estimated), description."""
    from ._native import model_parameters

    import pyarrow as pa

    with _work() as work:
        resolved = None
        if name is not None:
            resolved, _ = _model_inputs(name, Path(work))
            resolved = resolved[0]
        rows = model_parameters(resolved)
    columns = ["model", "origin", "parameter", "lower", "upper", "start_low", "start_high",
               "fixed", "description"]
    table = pa.table({c: [r[k] for r in rows] for k, c in enumerate(columns)},
                     schema=pa.schema([(c, pa.float64() if 3 <= k <= 7 else pa.string())
                                       for k, c in enumerate(columns)]))
    with _work() as work:
        scratch = Path(work) / "models.parquet"
        _frames.write_parquet(table, scratch, "models")
        return _frames.read_parquet(scratch, _frames.check_kind(frame))


def describe_model(name: Optional[str] = None) -> str:
    """What ``valuedrift models [NAME]`` prints: components with their equations and sources,
    parameters with bounds, start ranges and priors. ``name``: a built-in name, a model file or
    a model TOML text; ``None`` for every built-in model."""
    from ._native import model_text

    if name is None:
        return model_text(None)
    with _work() as work:
        resolved, renamed = _model_inputs(name, Path(work))
        try:
            return model_text(resolved[0])
        except ValuedriftError as error:
            text = str(error)
            for path, given in renamed.items():
                text = text.replace(path, given)
            raise ValuedriftError(text) from None


__all__ = [
    "Fit",
    "Results",
    "check",
    "compare",
    "contrast",
    "describe_model",
    "export",
    "fit",
    "models",
    "plan",
    "report",
    "simulate",
]

"""valuedrift from Python: reinforcement-learning drift-diffusion models of reward-versus-effort
choice, fitted to choices and response times, with data frames in and out.

The same engine as the ``valuedrift`` command line: every function here runs the command's own
code in this process, so results equal the command's files to the last digit and problems raise
:class:`ValuedriftError` with the command's message (file or data frame, row and column, what
was expected).

* Jobs: :func:`fit` (per subject, and hierarchical), :func:`simulate`, :func:`compare`,
  :func:`contrast`, :func:`check`, :func:`export`, :func:`plan`, :func:`report` (HTML);
  :func:`models` and :func:`describe_model` list models. Models are built-in names, model files or TOML texts.
* The first-passage engine over numpy arrays with broadcasting: :mod:`valuedrift.first_passage`
  (:func:`ln_density`, :func:`cdf`, :func:`bound_probability`, :func:`mean_decision_time`,
  :func:`sample`).

Research use only: parameters from valuedrift are research measurements, not diagnoses; it is
not a clinical or diagnostic instrument. De-identify participant data before analysis and follow
your ethics approval.
"""

from ._native import RESEARCH_CAUTION, ValuedriftError
from ._jobs import (
    Fit,
    Results,
    check,
    compare,
    contrast,
    describe_model,
    export,
    fit,
    models,
    plan,
    report,
    simulate,
)
from . import first_passage
from .first_passage import bound_probability, cdf, ln_density, mean_decision_time, sample

__all__ = [
    "RESEARCH_CAUTION",
    "Fit",
    "Results",
    "ValuedriftError",
    "bound_probability",
    "cdf",
    "check",
    "compare",
    "contrast",
    "describe_model",
    "export",
    "first_passage",
    "fit",
    "ln_density",
    "mean_decision_time",
    "models",
    "plan",
    "report",
    "sample",
    "simulate",
]

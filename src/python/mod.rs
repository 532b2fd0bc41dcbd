//! The Python extension module `valuedrift._native` (cargo feature `python`, built by maturin;
//! the Python package around it is python/valuedrift/).
//!
//! Two things cross the boundary, both kept small so that Python sees exactly what the command
//! line computes:
//!
//! * [`run`]: one command line of the `valuedrift` program, run in this process by
//!   [`crate::cli::run_args`] on a worker thread. The calling thread releases the GIL while it
//!   waits, polls Python's signal handlers every [`POLL`] (Ctrl-C in a terminal, "interrupt" in
//!   a notebook) and on an interrupt asks the command to stop ([`crate::progress::request_stop`]),
//!   waits for it and raises `KeyboardInterrupt`: a stopped command writes nothing, since every
//!   command stages its folder and puts it in place only when complete ([`crate::files`]). It
//!   also hands the latest progress step to a Python callback. Errors raise `ValuedriftError`
//!   with the text the command line prints after `error: `.
//! * [`first_passage`]: the first-passage engine ([`crate::first_passage`]) over flat arrays of
//!   equal length; the Python side broadcasts numpy arrays and reshapes the result.
//!
//! Design cost: a trial table given as a DataFrame is written by the Python side as a Parquet
//! file (Arrow underneath, no CSV) in a private folder and read by the command's own reader, so
//! every check and message is the command line's; the file name in messages is replaced by the
//! name the caller gives the frame. The price is one Parquet write and read per call.

use std::sync::mpsc;
use std::time::Duration;

use pyo3::buffer::PyBuffer;
use pyo3::create_exception;
use pyo3::exceptions::{PyException, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyBytes;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use crate::first_passage::{
    Bound as Side, DiffusionParams, bound_probability, cdf, ln_density, mean_decision_time,
    mean_decision_time_given, sample,
};

/// How often the waiting thread looks at Python's signals and the progress.
pub const POLL: Duration = Duration::from_millis(100);

create_exception!(
    valuedrift,
    ValuedriftError,
    PyException,
    "A valuedrift command failed; the message is the one the command line prints."
);

/// The error and its causes, as `main` prints them (without the leading `error: `).
fn error_text(error: &dyn std::error::Error) -> String {
    let mut text = error.to_string();
    let mut source = error.source();
    while let Some(cause) = source {
        text.push_str(&format!("\n  caused by: {cause}"));
        source = cause.source();
    }
    text
}

/// Runs one `valuedrift` command line (`args` without the program name) and returns when it
/// has finished. `progress`, when given, is called as `progress(step, done, total)` whenever the
/// latest progress step changes.
#[pyfunction]
#[pyo3(signature = (args, progress=None))]
fn run(py: Python<'_>, args: Vec<String>, progress: Option<Bound<'_, PyAny>>) -> PyResult<()> {
    let mut command_line = vec!["valuedrift".to_string()];
    command_line.extend(args);
    crate::progress::clear_stop();
    let (sender, receiver) = mpsc::channel();
    let worker = std::thread::spawn(move || {
        let outcome = crate::cli::run_args(&command_line).map_err(|e| error_text(e.as_ref()));
        // The receiver only goes away once the waiting thread has its answer.
        let _ = sender.send(outcome);
    });
    // The receiver moves into each wait without the GIL and back (it may not be shared).
    let mut receiver = Some(receiver);
    let mut wait = |py: Python<'_>, timeout: Option<Duration>| {
        let r = receiver.take();
        let (r, got) = py.detach(move || {
            let got = match (&r, timeout) {
                (Some(r), Some(t)) => r.recv_timeout(t),
                (Some(r), None) => r.recv().map_err(|_| mpsc::RecvTimeoutError::Disconnected),
                (None, _) => Err(mpsc::RecvTimeoutError::Disconnected),
            };
            (r, got)
        });
        receiver = r;
        got
    };
    let mut shown: Option<crate::progress::Step> = None;
    // Hands the latest step to the callback when it changed since the last call.
    let show = |shown: &mut Option<crate::progress::Step>| -> PyResult<()> {
        let Some(callback) = &progress else {
            return Ok(());
        };
        let latest = crate::progress::latest();
        if latest != *shown
            && let Some(step) = &latest
        {
            callback.call1((&step.what, step.done, step.total))?;
            *shown = latest;
        }
        Ok(())
    };
    let outcome = loop {
        match wait(py, Some(POLL)) {
            Ok(outcome) => {
                // The final count, which the last poll may have missed.
                if outcome.is_ok() {
                    show(&mut shown)?;
                }
                break Ok(outcome);
            }
            Err(mpsc::RecvTimeoutError::Disconnected) => {
                break Ok(Err(
                    "the command's thread ended without an answer".to_string()
                ));
            }
            Err(mpsc::RecvTimeoutError::Timeout) => {}
        }
        let interrupted = py.check_signals().and_then(|()| show(&mut shown)).err();
        if let Some(error) = interrupted {
            crate::progress::request_stop();
            // The command stops at its next check and writes nothing; wait for it.
            let _ = wait(py, None);
            break Err(error);
        }
    };
    let _ = py.detach(|| worker.join());
    crate::progress::clear_stop();
    match outcome? {
        Ok(()) => Ok(()),
        Err(message) => Err(ValuedriftError::new_err(message)),
    }
}

/// The quantities [`first_passage`] computes element by element.
#[derive(Clone, Copy)]
enum Pointwise {
    LnDensity,
    Cdf,
    BoundProbability,
    MeanDecisionTime,
}

/// One flat float64 array from a Python object with the buffer protocol (a contiguous numpy
/// array).
fn floats(py: Python<'_>, name: &str, object: &Bound<'_, PyAny>) -> PyResult<Vec<f64>> {
    let buffer = PyBuffer::<f64>::get(object)
        .map_err(|e| PyValueError::new_err(format!("{name}: expected float64 values ({e})")))?;
    buffer.to_vec(py)
}

/// Names of [`first_passage`]'s arrays, in the order of its arguments.
const ARRAYS: [&str; 9] = [
    "rt",
    "upper",
    "drift",
    "boundary",
    "start",
    "ndt",
    "drift_sd",
    "start_range",
    "ndt_range",
];

/// The engine on flat arrays of equal length n: `quantity` is one of `ln_density`, `cdf`,
/// `bound_probability`, `mean_decision_time`, `sample`. `rt` is read by the first two, `upper`
/// (1 for the upper bound, 0 for the lower, NaN for "either" in `mean_decision_time`) by all but
/// `sample`. Returns n float64 values as bytes; `sample` returns 2n: n bound flags (1 upper,
/// 0 lower), then n response times, drawn in order from one ChaCha8 stream seeded with `seed`.
/// A value outside its domain raises `ValueError` naming the element and the parameter.
#[pyfunction]
#[pyo3(signature = (quantity, arrays, seed=1))]
fn first_passage<'py>(
    py: Python<'py>,
    quantity: &str,
    arrays: Vec<Bound<'py, PyAny>>,
    seed: u64,
) -> PyResult<Bound<'py, PyBytes>> {
    if arrays.len() != ARRAYS.len() {
        return Err(PyValueError::new_err(format!(
            "{} arrays given; expected {} ({})",
            arrays.len(),
            ARRAYS.len(),
            ARRAYS.join(", ")
        )));
    }
    let mut columns = Vec::with_capacity(ARRAYS.len());
    for (name, object) in ARRAYS.iter().zip(&arrays) {
        columns.push(floats(py, name, object)?);
    }
    let n = columns[0].len();
    if let Some((name, c)) = ARRAYS.iter().zip(&columns).find(|(_, c)| c.len() != n) {
        return Err(PyValueError::new_err(format!(
            "{name} has {} values, rt has {n}; expected arrays of one length",
            c.len()
        )));
    }
    let pointwise = match quantity {
        "ln_density" => Some(Pointwise::LnDensity),
        "cdf" => Some(Pointwise::Cdf),
        "bound_probability" => Some(Pointwise::BoundProbability),
        "mean_decision_time" => Some(Pointwise::MeanDecisionTime),
        "sample" => None,
        other => {
            return Err(PyValueError::new_err(format!(
                "{other}: expected ln_density, cdf, bound_probability, mean_decision_time or \
                 sample"
            )));
        }
    };
    let values = py
        .detach(|| {
            let columns = Columns(&columns);
            match pointwise {
                Some(q) => columns.pointwise(q),
                None => columns.draw(seed),
            }
        })
        .map_err(PyValueError::new_err)?;
    let bytes: Vec<u8> = values.iter().flat_map(|x| x.to_ne_bytes()).collect();
    Ok(PyBytes::new(py, &bytes))
}

/// [`first_passage`]'s arrays, in the order of [`ARRAYS`], checked element by element.
struct Columns<'a>(&'a [Vec<f64>]);

impl Columns<'_> {
    fn len(&self) -> usize {
        self.0[0].len()
    }

    fn params(&self, i: usize) -> Result<DiffusionParams, String> {
        let c = |k: usize| self.0[k][i];
        DiffusionParams::new(c(2), c(3), c(4), c(5))
            .and_then(|p| p.with_variability(c(6), c(7), c(8)))
            .map_err(|e| format!("element {i}: {e}"))
    }

    /// The bound of element `i`, `None` for NaN ("either bound").
    fn side(&self, i: usize) -> Result<Option<Side>, String> {
        let flag = self.0[1][i];
        if flag == 1.0 {
            Ok(Some(Side::Upper))
        } else if flag == 0.0 {
            Ok(Some(Side::Lower))
        } else if flag.is_nan() {
            Ok(None)
        } else {
            Err(format!(
                "element {i}: bound flag {flag} is not 1 (upper) or 0 (lower)"
            ))
        }
    }

    fn needs_side(&self, i: usize) -> Result<Side, String> {
        self.side(i)?
            .ok_or_else(|| format!("element {i}: bound is missing; expected upper or lower"))
    }

    fn rt(&self, i: usize) -> Result<f64, String> {
        let t = self.0[0][i];
        if t.is_finite() && t >= 0.0 {
            Ok(t)
        } else {
            Err(format!(
                "element {i}: rt = {t} is not a response time (expected a finite number of \
                 seconds >= 0)"
            ))
        }
    }

    /// One value per element, elements in parallel (each is computed alone, so the result does
    /// not depend on the thread count).
    fn pointwise(&self, quantity: Pointwise) -> Result<Vec<f64>, String> {
        (0..self.len())
            .into_par_iter()
            .map(|i| {
                let p = self.params(i)?;
                Ok(match quantity {
                    Pointwise::LnDensity => ln_density(self.rt(i)?, self.needs_side(i)?, &p),
                    Pointwise::Cdf => cdf(self.rt(i)?, self.needs_side(i)?, &p),
                    Pointwise::BoundProbability => bound_probability(self.needs_side(i)?, &p),
                    Pointwise::MeanDecisionTime => match self.side(i)? {
                        Some(b) => mean_decision_time_given(b, &p),
                        None => mean_decision_time(&p),
                    },
                })
            })
            .collect()
    }

    /// One draw per element, in element order from one seeded stream.
    fn draw(&self, seed: u64) -> Result<Vec<f64>, String> {
        let n = self.len();
        let all: Vec<DiffusionParams> = (0..n).map(|i| self.params(i)).collect::<Result<_, _>>()?;
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut out = vec![0.0; 2 * n];
        for (i, p) in all.iter().enumerate() {
            let (bound, time) = sample(p, &mut rng);
            out[i] = f64::from(u8::from(bound == Side::Upper));
            out[n + i] = time;
        }
        Ok(out)
    }
}

/// What `valuedrift models [NAME]` prints: every built-in model, or the one named (a built-in
/// name or a model file).
#[pyfunction]
#[pyo3(signature = (name=None))]
fn model_text(name: Option<&str>) -> PyResult<String> {
    match name {
        Some(n) => crate::model::load_model(n)
            .map(|m| crate::cli::models::description(&m))
            .map_err(|e| ValuedriftError::new_err(error_text(&e))),
        None => Ok(crate::model::built_in_models()
            .iter()
            .map(|m| format!("{}\n", crate::cli::models::description(m)))
            .collect()),
    }
}

/// One row per model and parameter: (model, origin, parameter, lower, upper, start_low,
/// start_high, fixed, description) of every built-in model, or of the one named.
type ParameterRow = (
    String,
    String,
    String,
    f64,
    f64,
    f64,
    f64,
    Option<f64>,
    String,
);

/// The parameters of every built-in model, or of the one named (name or file).
#[pyfunction]
#[pyo3(signature = (name=None))]
fn model_parameters(name: Option<&str>) -> PyResult<Vec<ParameterRow>> {
    let models = match name {
        Some(n) => vec![
            crate::model::load_model(n).map_err(|e| ValuedriftError::new_err(error_text(&e)))?,
        ],
        None => crate::model::built_in_models(),
    };
    Ok(models
        .iter()
        .flat_map(|m| {
            m.parameters.iter().map(|p| {
                (
                    m.name.clone(),
                    m.origin.clone(),
                    p.name.clone(),
                    p.lower,
                    p.upper,
                    p.start_range.0,
                    p.start_range.1,
                    p.fixed,
                    p.description.clone(),
                )
            })
        })
        .collect())
}

/// The extension module.
#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("ValuedriftError", m.py().get_type::<ValuedriftError>())?;
    m.add_function(wrap_pyfunction!(run, m)?)?;
    m.add_function(wrap_pyfunction!(first_passage, m)?)?;
    m.add_function(wrap_pyfunction!(model_text, m)?)?;
    m.add_function(wrap_pyfunction!(model_parameters, m)?)?;
    m.add("RESEARCH_CAUTION", crate::cli::RESEARCH_CAUTION)?;
    Ok(())
}

//! A fit folder's estimates read back for a model: parameters.csv (or eb_parameters.csv) and the
//! model definition recorded in run.json, checked against the model given.

use crate::files::InputError;
use crate::model::Model;
use crate::results::fit_folder::RunRecord;
use std::collections::HashMap;
use std::path::Path;

/// Reads the natural-scale estimates of `model` for each subject from a `parameters.csv` written
/// by `valuedrift fit` (columns subject, model, parameter, estimate; others ignored). Returns, per
/// subject of `subjects` and in that order, every model parameter in the model's order (fixed
/// parameters not in the file take their fixed value).
pub fn read_estimates(
    path: &Path,
    model: &Model,
    subjects: &[impl AsRef<str>],
) -> Result<Vec<Vec<f64>>, InputError> {
    // subject → parameter slot → estimate
    let mut found: HashMap<String, HashMap<usize, f64>> = HashMap::new();
    for row in crate::results::parameters_file::read_rows(path, &model.name, None)? {
        let Some(slot) = model
            .parameters
            .iter()
            .position(|p| p.name == row.parameter)
        else {
            return Err(InputError::at(
                path,
                row.line,
                "parameter",
                format!(
                    "`{}` is not a parameter of model {}",
                    row.parameter, model.name
                ),
            ));
        };
        let estimate = within_bounds(path, row.line, &model.parameters[slot], row.estimate)?;
        found.entry(row.subject).or_default().insert(slot, estimate);
    }
    subjects
        .iter()
        .map(|s| {
            let id = s.as_ref();
            let Some(estimates) = found.get(id) else {
                return Err(InputError::file(
                    path,
                    format!(
                        "has no estimates of model {} for subject {} (was it fitted?)",
                        model.name, id
                    ),
                ));
            };
            model
                .parameters
                .iter()
                .enumerate()
                .map(|(slot, spec)| match (estimates.get(&slot), spec.fixed) {
                    (Some(&x), _) => Ok(x),
                    (None, Some(fixed)) => Ok(fixed),
                    (None, None) => Err(InputError::file(
                        path,
                        format!(
                            "has no estimate of `{}` of model {} for subject {}",
                            spec.name, model.name, id
                        ),
                    )),
                })
                .collect()
        })
        .collect()
}

/// Checks that `model` is the model that was fitted: its definition must equal the one recorded
/// for a model of the same name in `fits/run.json` (`models[].definition`, written by
/// `valuedrift fit`). Returns false, with nothing checked, when the folder has no run.json (a
/// parameters table put together by hand). A model missing from the record, an unreadable record
/// or a changed definition is an error; a changed definition is reported at the first line that
/// differs, with both versions of that line.
pub fn check_recorded_model(fits: &Path, model: &Model) -> Result<bool, InputError> {
    let Some(record) = RunRecord::read(fits)? else {
        return Ok(false);
    };
    let definition = record.definition_of(&model.name)?;
    if definition == model.text {
        return Ok(true);
    }
    let (then, now): (Vec<&str>, Vec<&str>) =
        (definition.lines().collect(), model.text.lines().collect());
    let line = (0..then.len().max(now.len()))
        .find(|&i| then.get(i) != now.get(i))
        .unwrap_or(0);
    let show = |l: Option<&&str>| l.map_or("(no line)".to_string(), |l| format!("`{}`", l.trim()));
    Err(InputError {
        file: std::path::PathBuf::from(&model.origin),
        line: Some(line as u64 + 1),
        column: None,
        message: format!(
            "model {} has changed since the fit: its definition differs from the one recorded in \
             {} (models[].definition) from this line on (recorded {}, now {}). Export and check \
             need the fitted model: save the recorded definition as a .toml file and pass it \
             with --model, or fit again",
            model.name,
            record.path.display(),
            show(then.get(line)),
            show(now.get(line)),
        ),
    })
}

/// Width of the band around a parameter's bounds, relative to the larger of the bounds' width and
/// magnitudes, within which an estimate counts as on the bound (and is set onto it): estimates
/// written by `valuedrift fit` at a bound can differ from it by rounding in the back-transform
/// (common practice: a few ulps, far below 1e-9 of that scale).
const BOUND_TOLERANCE: f64 = 1e-9;

/// The estimate `x` of `spec` if it lies within the model's bounds (values within
/// [`BOUND_TOLERANCE`] of the width outside a bound are set onto it), else an error at `line`,
/// column `estimate`, with the value and the bounds.
fn within_bounds(
    path: &Path,
    line: u64,
    spec: &crate::model::ParameterSpec,
    x: f64,
) -> Result<f64, InputError> {
    let scale = (spec.upper - spec.lower)
        .max(spec.lower.abs())
        .max(spec.upper.abs())
        .max(f64::MIN_POSITIVE);
    let slack = BOUND_TOLERANCE * scale;
    if x >= spec.lower - slack && x <= spec.upper + slack {
        return Ok(x.clamp(spec.lower, spec.upper));
    }
    let expected = match spec.fixed {
        Some(v) => format!("the model fixes `{}` at {v}", spec.name),
        None => format!(
            "outside the bounds [{}, {}] of `{}` in the model",
            spec.lower, spec.upper, spec.name
        ),
    };
    Err(InputError::at(
        path,
        line,
        "estimate",
        format!(
            "{x}: {expected}; the estimates do not belong to this model (was the model file \
             changed after the fit?)"
        ),
    ))
}

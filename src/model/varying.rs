//! Parameters that vary over trials: by the levels of a categorical column (a condition, block
//! or session), and linearly with numeric per-trial covariates on the unconstrained scale.
//!
//! A model file declares it on the parameter:
//!
//! ```toml
//! [parameters.boundary]
//! lower = 0.3
//! upper = 6.0
//! start = [0.5, 3.0]
//! by = "instruction"                  # a column of the trial table
//! levels = ["speed", "accuracy"]      # one estimated boundary per level
//!
//! [parameters.value_scale]
//! lower = 0.0
//! upper = 30.0
//! start = [0.1, 10.0]
//! slopes = { pupil = [-0.5, 0.5] }    # covariate = range of starting slopes
//! ```
//!
//! On trial t a varying parameter x with transform g (the map from the unconstrained scale θ to
//! the declared bounds, [`super::Transform`]) takes the value
//!
//! x(t) = g(θ_level(t) + Σ_j β_j·c_j(t)),
//!
//! where θ_level(t) is the unconstrained value of the level of the trial's condition (or of the
//! single intercept when there is no `by`), c_j(t) the trial's value of covariate j and β_j its
//! slope. Because the sum is taken on the unconstrained scale, every trial's value stays inside
//! the declared bounds, whatever the covariate (the linear predictor on a link scale of
//! generalised linear models; Nelder & Wedderburn 1972). With one level and no slopes x(t) is
//! the plain parameter. The gradient is exact: ∂x(t)/∂θ_level = g′·1 and ∂x(t)/∂β_j =
//! g′·c_j(t), carried by the dual numbers of [`super::dual`].
//!
//! Generated parameters get self-explaining names: `boundary[instruction=speed]` (the boundary
//! in the speed condition, natural scale) and `value_scale[slope:pupil]` (change of
//! value_scale's unconstrained value per unit of pupil). A slope is reported on the
//! unconstrained scale, since that is where it is linear; its sign reads directly (positive:
//! the parameter grows with the covariate). The intercept is the parameter's value where every
//! covariate is 0, so centre a covariate in the table when its mean should be the reference.

use super::params::ParameterSpec;

/// Default range of starting slopes when a model file gives `slopes = ["column"]`.
pub const DEFAULT_SLOPE_START: (f64, f64) = (-0.1, 0.1);

/// How a parameter varies, as declared in a model file.
#[derive(Clone, Debug, PartialEq)]
pub struct VariationSpec {
    /// The categorical column and its levels, in declared order.
    pub by: Option<(String, Vec<String>)>,
    /// Numeric covariate columns with the range of starting slopes of each.
    pub slopes: Vec<(String, (f64, f64))>,
}

/// Where a component's parameter comes from on each trial.
#[derive(Clone, Debug, PartialEq)]
pub enum Source {
    /// The same on every trial: the model parameter in this slot (of [`super::Model::parameters`]).
    Constant(usize),
    /// Varies over trials.
    Varying(Variation),
}

/// A parameter that varies over trials: the slots of its level intercepts and slopes.
#[derive(Clone, Debug, PartialEq)]
pub struct Variation {
    /// The categorical column, if the parameter differs by condition.
    pub column: Option<String>,
    /// Each level with the slot of its intercept; one entry with an empty level when there is
    /// no column.
    pub levels: Vec<(String, usize)>,
    /// Each covariate column with the slot of its slope.
    pub slopes: Vec<(String, usize)>,
}

/// Name of the parameter of `base` at level `level` of `column`.
pub fn level_name(base: &str, column: &str, level: &str) -> String {
    format!("{base}[{column}={level}]")
}

/// Name of the slope of `base` on covariate `column`.
pub fn slope_name(base: &str, column: &str) -> String {
    format!("{base}[slope:{column}]")
}

/// Reads `by`, `levels` and `slopes` of one parameter table; `Err((key, message))` names the
/// offending key.
pub fn parse(table: &toml::Table) -> Result<Option<VariationSpec>, (String, String)> {
    let by = match (table.get("by"), table.get("levels")) {
        (None, None) => None,
        (Some(toml::Value::String(column)), Some(toml::Value::Array(levels))) => {
            let mut names = Vec::with_capacity(levels.len());
            for level in levels {
                let name = match level {
                    toml::Value::String(s) => s.clone(),
                    toml::Value::Integer(i) => i.to_string(),
                    _ => {
                        return Err((
                            "levels".into(),
                            format!("expected level names (text or whole numbers), found {level}"),
                        ));
                    }
                };
                if names.contains(&name) {
                    return Err(("levels".into(), format!("level {name:?} is listed twice")));
                }
                names.push(name);
            }
            if names.is_empty() {
                return Err(("levels".into(), "expected at least one level".into()));
            }
            if column.trim().is_empty() {
                return Err(("by".into(), "expected a column name".into()));
            }
            Some((column.clone(), names))
        }
        (Some(toml::Value::String(_)), _) => {
            return Err((
                "levels".into(),
                "missing; expected the list of the column's levels, e.g. [\"speed\", \"accuracy\"]"
                    .into(),
            ));
        }
        (Some(_), _) => return Err(("by".into(), "expected a column name".into())),
        (None, Some(_)) => {
            return Err((
                "by".into(),
                "missing; `levels` needs the column they belong to".into(),
            ));
        }
    };
    let mut slopes = Vec::new();
    match table.get("slopes") {
        None => {}
        Some(toml::Value::Array(columns)) => {
            for column in columns {
                let toml::Value::String(name) = column else {
                    return Err((
                        "slopes".into(),
                        format!("expected column names, found {column}"),
                    ));
                };
                slopes.push((name.clone(), DEFAULT_SLOPE_START));
            }
        }
        Some(toml::Value::Table(columns)) => {
            for (name, range) in columns {
                let numbers: Option<Vec<f64>> = match range {
                    toml::Value::Array(a) if a.len() == 2 => a
                        .iter()
                        .map(|v| match v {
                            toml::Value::Float(x) if x.is_finite() => Some(*x),
                            toml::Value::Integer(i) => Some(*i as f64),
                            _ => None,
                        })
                        .collect(),
                    _ => None,
                };
                match numbers.as_deref() {
                    Some(&[lo, hi]) if lo <= hi => slopes.push((name.clone(), (lo, hi))),
                    _ => {
                        return Err((
                            format!("slopes.{name}"),
                            "expected [low, high], the range of starting slopes".into(),
                        ));
                    }
                }
            }
        }
        Some(_) => {
            return Err((
                "slopes".into(),
                "expected a list of columns or a table of column = [low, high]".into(),
            ));
        }
    }
    for (i, (column, _)) in slopes.iter().enumerate() {
        if slopes[..i].iter().any(|(c, _)| c == column) {
            return Err((
                "slopes".into(),
                format!("column {column:?} is listed twice"),
            ));
        }
        if by.as_ref().is_some_and(|(b, _)| b == column) {
            return Err((
                "slopes".into(),
                format!(
                    "{column:?} is already the `by` column; a column gives either levels or a covariate"
                ),
            ));
        }
    }
    Ok((by.is_some() || !slopes.is_empty()).then_some(VariationSpec { by, slopes }))
}

/// Expands declared parameters (the components' parameters, in order) with their variations
/// into the estimated parameters and, per component parameter, where its value comes from.
pub fn expand(
    declared: Vec<(ParameterSpec, Option<VariationSpec>)>,
) -> (Vec<ParameterSpec>, Vec<Source>) {
    let mut parameters = Vec::new();
    let mut sources = Vec::with_capacity(declared.len());
    for (spec, variation) in declared {
        let Some(variation) = variation else {
            sources.push(Source::Constant(parameters.len()));
            parameters.push(spec);
            continue;
        };
        let mut levels = Vec::new();
        match &variation.by {
            Some((column, names)) => {
                for level in names {
                    levels.push((level.clone(), parameters.len()));
                    let what = if spec.description.is_empty() {
                        spec.name.clone()
                    } else {
                        spec.description.clone()
                    };
                    parameters.push(ParameterSpec {
                        name: level_name(&spec.name, column, level),
                        description: format!("{what}, when {column} = {level}"),
                        ..spec.clone()
                    });
                }
            }
            None => {
                levels.push((String::new(), parameters.len()));
                parameters.push(spec.clone());
            }
        }
        let mut slopes = Vec::new();
        for (column, start) in &variation.slopes {
            slopes.push((column.clone(), parameters.len()));
            parameters.push(ParameterSpec {
                name: slope_name(&spec.name, column),
                lower: f64::NEG_INFINITY,
                upper: f64::INFINITY,
                start_range: *start,
                fixed: None,
                prior: None,
                description: format!(
                    "change of {}'s unconstrained value per unit of {column}",
                    spec.name
                ),
            });
        }
        sources.push(Source::Varying(Variation {
            column: variation.by.as_ref().map(|(c, _)| c.clone()),
            levels,
            slopes,
        }));
    }
    (parameters, sources)
}

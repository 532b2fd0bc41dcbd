//! Model files: declarative TOML naming one component of each kind and declaring parameters.
//!
//! ```toml
//! name = "gainloss-linear"
//! description = "…"
//! [learning]
//! rule = "gain-loss"          # delta | gain-loss | none; rule options such as split = "outcome"
//! forgetting = false          # true: unchosen values decay towards initial_value at forget_rate
//! [cost]
//! shape = "linear"            # none | linear | quadratic | hyperbolic | exponential
//! [drift]
//! mapping = "linear"          # linear | bounded (diffusion stage only)
//! [choice]
//! stage = "diffusion"         # diffusion | softmax
//! [parameters.gain_rate]
//! lower = 0.0
//! upper = 1.0
//! start = [0.05, 0.6]         # range of starting values (natural scale)
//! # fixed = 0.3               # instead of estimating it
//! # prior = { family = "beta", a = 1.5, b = 1.5 }
//! ```

use super::Model;
use super::components::{
    CHOICE_STAGES, COST_SHAPES, CostShape, DRIFT_MAPPINGS, Entry, LEARNING_RULES, Options, Signal,
    find,
};
use super::params::{ParameterSpec, Prior};
use super::varying::{self, VariationSpec};
use std::collections::BTreeMap;

/// A problem in a model file, naming the file and the key.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("{origin}: {key}: {message}")]
pub struct ModelError {
    /// The file (or built-in model name) the definition came from.
    pub origin: String,
    /// The key, dotted (e.g. `parameters.gain_rate.upper`), or `(file)` for the whole file.
    pub key: String,
    /// What is wrong and what was expected.
    pub message: String,
}

/// A cost attribute's name, its shape and the shape's options.
type CostEntry = (String, &'static Entry<dyn CostShape>, Options);

/// The cost attribute of the canonical effort_a/effort_b columns.
pub const EFFORT: &str = "effort";

/// Names that cannot be cost attributes: the other per-option columns of the trial table.
const RESERVED_ATTRIBUTES: [&str; 3] = ["option", "reward", "outcome_if"];

/// A component parameter's name for a cost attribute: cost shapes name their parameters for
/// effort (`effort_weight`); for attribute `delay` that is `delay_weight`.
pub fn for_attribute(parameter: &str, attribute: &str) -> String {
    match parameter.strip_prefix("effort_") {
        Some(rest) if attribute != EFFORT => format!("{attribute}_{rest}"),
        _ => parameter.to_string(),
    }
}

/// Model-level parameters with their fixed default when not declared.
const MODEL_DEFAULTS: &[(&str, f64)] = &[("initial_value", 0.0)];

struct Reader<'a> {
    origin: &'a str,
}

impl Reader<'_> {
    fn error(&self, key: &str, message: impl Into<String>) -> ModelError {
        ModelError {
            origin: self.origin.to_string(),
            key: key.to_string(),
            message: message.into(),
        }
    }

    fn table<'t>(&self, root: &'t toml::Table, key: &str) -> Result<&'t toml::Table, ModelError> {
        match root.get(key) {
            Some(toml::Value::Table(t)) => Ok(t),
            Some(_) => Err(self.error(key, "expected a table")),
            None => Err(self.error(key, "missing; expected a table")),
        }
    }

    fn string(&self, table: &toml::Table, prefix: &str, key: &str) -> Result<String, ModelError> {
        match table.get(key) {
            Some(toml::Value::String(s)) => Ok(s.clone()),
            Some(_) => Err(self.error(&dotted(prefix, key), "expected a string")),
            None => Err(self.error(&dotted(prefix, key), "missing; expected a string")),
        }
    }

    fn number(&self, value: &toml::Value, key: &str) -> Result<f64, ModelError> {
        match value {
            toml::Value::Float(x) if !x.is_nan() => Ok(*x),
            toml::Value::Integer(i) => Ok(*i as f64),
            _ => Err(self.error(key, format!("expected a number, found {value}"))),
        }
    }

    /// The component of a kind named by `selector` in table `section`, with the remaining keys
    /// of the table as its options.
    fn component<'e, T: ?Sized>(
        &self,
        root: &toml::Table,
        section: &str,
        selector: &str,
        registry: &'e [Entry<T>],
        model_keys: &[&str],
    ) -> Result<(&'e Entry<T>, Options), ModelError> {
        let table = self.table(root, section)?;
        let name = self.string(table, section, selector)?;
        let entry = find(registry, &name).ok_or_else(|| {
            let known: Vec<&str> = registry.iter().map(|e| e.name).collect();
            self.error(
                &dotted(section, selector),
                format!("unknown {selector} '{name}' (known: {})", known.join(", ")),
            )
        })?;
        let mut options = table.clone();
        options.remove(selector);
        for key in model_keys {
            options.remove(*key);
        }
        Ok((entry, options))
    }

    /// The cost attributes of `[cost]`: `shape = "…"` for the one attribute `effort` (columns
    /// effort_a, effort_b), or one table per named attribute (`[cost.delay] shape = "…"`, columns
    /// delay_a, delay_b), applied in the order written.
    fn cost_attributes(&self, root: &toml::Table) -> Result<Vec<CostEntry>, ModelError> {
        let table = self.table(root, "cost")?;
        if table.contains_key("shape") {
            let (entry, options) = self.component(root, "cost", "shape", COST_SHAPES, &[])?;
            return Ok(vec![(EFFORT.to_string(), entry, options)]);
        }
        if table.is_empty() {
            return Err(self.error(
                "cost",
                "expected shape = \"…\" (the effort cost) or one table per cost attribute, \
                 such as [cost.effort] and [cost.delay]",
            ));
        }
        let mut out = Vec::new();
        for (attribute, value) in table {
            let key = format!("cost.{attribute}");
            let toml::Value::Table(sub) = value else {
                return Err(self.error(
                    &key,
                    "expected a table with shape = \"…\" for this cost attribute",
                ));
            };
            let valid = !attribute.is_empty()
                && attribute
                    .chars()
                    .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_')
                && !RESERVED_ATTRIBUTES.contains(&attribute.as_str());
            if !valid {
                return Err(self.error(
                    &key,
                    format!(
                        "expected an attribute name of lower-case letters, digits and _ other \
                         than {} (its columns are <name>_a and <name>_b)",
                        RESERVED_ATTRIBUTES.join(", ")
                    ),
                ));
            }
            let name = self.string(sub, &key, "shape")?;
            let entry = find(COST_SHAPES, &name).ok_or_else(|| {
                let known: Vec<&str> = COST_SHAPES.iter().map(|e| e.name).collect();
                self.error(
                    &dotted(&key, "shape"),
                    format!("unknown shape '{name}' (known: {})", known.join(", ")),
                )
            })?;
            let mut options = sub.clone();
            options.remove("shape");
            out.push((attribute.clone(), entry, options));
        }
        Ok(out)
    }

    fn parameter(
        &self,
        name: &str,
        value: &toml::Value,
    ) -> Result<(ParameterSpec, Option<VariationSpec>), ModelError> {
        let prefix = format!("parameters.{name}");
        let toml::Value::Table(t) = value else {
            return Err(self.error(
                &prefix,
                "expected a table with lower, upper and start (or fixed)",
            ));
        };
        const KNOWN: [&str; 9] = [
            "lower",
            "upper",
            "start",
            "fixed",
            "prior",
            "description",
            "by",
            "levels",
            "slopes",
        ];
        if let Some(key) = t.keys().find(|k| !KNOWN.contains(&k.as_str())) {
            return Err(self.error(
                &dotted(&prefix, key),
                format!("unknown key (known: {})", KNOWN.join(", ")),
            ));
        }
        let description = match t.get("description") {
            Some(toml::Value::String(s)) => s.clone(),
            Some(_) => return Err(self.error(&dotted(&prefix, "description"), "expected a string")),
            None => String::new(),
        };
        if let Some(fixed) = t.get("fixed") {
            let x = self.number(fixed, &dotted(&prefix, "fixed"))?;
            if !x.is_finite() {
                return Err(self.error(&dotted(&prefix, "fixed"), "expected a finite number"));
            }
            if let Some(key) = ["lower", "upper", "start", "prior", "by", "levels", "slopes"]
                .iter()
                .find(|k| t.contains_key(**k))
            {
                return Err(self.error(&dotted(&prefix, key), "not allowed with 'fixed'"));
            }
            return Ok((
                ParameterSpec {
                    name: name.to_string(),
                    lower: x,
                    upper: x,
                    start_range: (x, x),
                    fixed: Some(x),
                    prior: None,
                    description,
                },
                None,
            ));
        }
        let bound = |key: &str| -> Result<f64, ModelError> {
            let v = t.get(key).ok_or_else(|| {
                self.error(
                    &dotted(&prefix, key),
                    "missing; expected a number (inf allowed)",
                )
            })?;
            self.number(v, &dotted(&prefix, key))
        };
        let (lower, upper) = (bound("lower")?, bound("upper")?);
        if lower >= upper {
            return Err(self.error(
                &dotted(&prefix, "upper"),
                format!("must be above lower ({lower})"),
            ));
        }
        let start_key = dotted(&prefix, "start");
        let start = match t.get("start") {
            Some(toml::Value::Array(a)) if a.len() == 2 => (
                self.number(&a[0], &start_key)?,
                self.number(&a[1], &start_key)?,
            ),
            Some(_) => return Err(self.error(&start_key, "expected [low, high]")),
            None => {
                return Err(self.error(
                    &start_key,
                    "missing; expected [low, high] inside (lower, upper)",
                ));
            }
        };
        if !(start.0 > lower && start.1 < upper && start.0 <= start.1) {
            return Err(self.error(
                &start_key,
                format!(
                    "[{}, {}] must be ordered and strictly inside ({lower}, {upper})",
                    start.0, start.1
                ),
            ));
        }
        let prior = match t.get("prior") {
            None => None,
            Some(v) => {
                let key = dotted(&prefix, "prior");
                let prior: Prior = v
                    .clone()
                    .try_into()
                    .map_err(|e| self.error(&key, format!("expected {{ family = \"normal\" | \"beta\" | \"gamma\" | \"lognormal\", … }}: {e}")))?;
                prior.validate().map_err(|m| self.error(&key, m))?;
                Some(prior)
            }
        };
        let variation = varying::parse(t)
            .map_err(|(key, message)| self.error(&dotted(&prefix, &key), message))?;
        Ok((
            ParameterSpec {
                name: name.to_string(),
                lower,
                upper,
                start_range: start,
                fixed: None,
                prior,
                description,
            },
            variation,
        ))
    }
}

/// The diffusion stage's across-trial ranges must keep the process defined at every allowed
/// value (the domain of [`crate::first_passage::DiffusionParams::with_variability`]): the
/// relative start w′ ∈ [start − start_range/2, start + start_range/2] inside (0, 1), so
/// start_range ∈ [0, 1) with start's lower bound above start_range's upper bound / 2 and start's
/// upper bound below 1 − that; the non-decision time ndt′ ∈ [ndt − ndt_range/2, ndt + ndt_range/2]
/// at or above 0, so ndt_range ≥ 0 with ndt's lower bound at least half of ndt_range's upper
/// bound. Undeclared parameters take their fixed defaults (start 0.5, ranges 0).
fn check_diffusion_ranges(parameters: &[ParameterSpec]) -> Result<(), (String, String)> {
    let bounds = |name: &str, default: f64| {
        parameters
            .iter()
            .find(|p| p.name == name)
            .map_or((default, default), |p| (p.lower, p.upper))
    };
    let key = |name: &str| format!("parameters.{name}");
    let (start_lo, start_hi) = bounds("start", 0.5);
    let (sz_lo, sz_hi) = bounds("start_range", 0.0);
    if !(sz_lo >= 0.0 && sz_hi < 1.0) {
        return Err((
            key("start_range"),
            format!(
                "bounds [{sz_lo}, {sz_hi}] must lie within [0, 1) (a width on the scale of start)"
            ),
        ));
    }
    let half = 0.5 * sz_hi;
    if !(start_lo - half > 0.0 && start_hi + half < 1.0) {
        return Err((
            key("start_range"),
            format!(
                "start ± start_range/2 must stay inside (0, 1): start's bounds [{start_lo}, \
                 {start_hi}] with start_range up to {sz_hi} reach [{}, {}]; lower start_range's \
                 upper bound or narrow start's bounds",
                start_lo - half,
                start_hi + half
            ),
        ));
    }
    let (ndt_lo, _) = bounds("ndt", 0.0);
    let (st_lo, st_hi) = bounds("ndt_range", 0.0);
    if !(st_lo >= 0.0 && st_hi.is_finite()) {
        return Err((
            key("ndt_range"),
            format!(
                "bounds [{st_lo}, {st_hi}] must be finite and at or above 0 (a width in seconds)"
            ),
        ));
    }
    if ndt_lo < 0.5 * st_hi {
        return Err((
            key("ndt_range"),
            format!(
                "ndt − ndt_range/2 must stay at or above 0: ndt's lower bound {ndt_lo} is below \
                 half of ndt_range's upper bound {st_hi}; raise ndt's lower bound to at least {} \
                 or lower ndt_range's upper bound",
                0.5 * st_hi
            ),
        ));
    }
    Ok(())
}

fn dotted(prefix: &str, key: &str) -> String {
    if prefix.is_empty() {
        key.to_string()
    } else {
        format!("{prefix}.{key}")
    }
}

/// Parses and checks a model definition. `origin` names it in errors.
pub fn parse_model(text: &str, origin: &str) -> Result<Model, ModelError> {
    let r = Reader { origin };
    let root: toml::Table = text.parse().map_err(|e: toml::de::Error| {
        let line = e.span().map_or(String::new(), |span| {
            let before = &text.as_bytes()[..span.start.min(text.len())];
            format!(
                " at line {}",
                1 + before.iter().filter(|&&b| b == b'\n').count()
            )
        });
        r.error("(file)", format!("not valid TOML{line}: {}", e.message()))
    })?;
    const TOP: [&str; 7] = [
        "name",
        "description",
        "learning",
        "cost",
        "drift",
        "choice",
        "parameters",
    ];
    if let Some(key) = root.keys().find(|k| !TOP.contains(&k.as_str())) {
        return Err(r.error(key, format!("unknown key (known: {})", TOP.join(", "))));
    }
    let name = r.string(&root, "", "name")?;
    let description = match root.get("description") {
        Some(toml::Value::String(s)) => s.clone(),
        Some(_) => return Err(r.error("description", "expected a string")),
        None => String::new(),
    };
    let (learning, learning_options) =
        r.component(&root, "learning", "rule", LEARNING_RULES, &["forgetting"])?;
    let forgetting = match r.table(&root, "learning")?.get("forgetting") {
        None => false,
        Some(toml::Value::Boolean(b)) => *b,
        Some(_) => return Err(r.error("learning.forgetting", "expected true or false")),
    };
    let costs = r.cost_attributes(&root)?;
    let (choice, choice_options) = r.component(&root, "choice", "stage", CHOICE_STAGES, &[])?;
    let uses_drift = (choice.build)(&choice_options, &|_| 0)
        .map_err(|m| r.error("choice", m))?
        .signal()
        != Signal::Values;
    let drift = if uses_drift {
        Some(r.component(&root, "drift", "mapping", DRIFT_MAPPINGS, &[])?)
    } else {
        if root.contains_key("drift") {
            return Err(r.error(
                "drift",
                format!(
                    "the '{}' choice stage uses no drift mapping; remove [drift]",
                    choice.name
                ),
            ));
        }
        None
    };

    // Parameters: declared ones in file order, then defaults of what the components need.
    let declared = match root.get("parameters") {
        Some(toml::Value::Table(t)) => t.clone(),
        Some(_) => return Err(r.error("parameters", "expected a table of parameter tables")),
        None => toml::Table::new(),
    };
    let mut needed: Vec<String> = Vec::new();
    let mut defaults: BTreeMap<String, f64> = MODEL_DEFAULTS
        .iter()
        .map(|(n, x)| (n.to_string(), *x))
        .collect();
    let mut need = |params: &[&'static str], defs: &[(&'static str, f64)], attribute: &str| {
        needed.extend(params.iter().map(|n| for_attribute(n, attribute)));
        defaults.extend(defs.iter().map(|(n, x)| (for_attribute(n, attribute), *x)));
    };
    need(learning.parameters, learning.defaults, EFFORT);
    for (attribute, entry, _) in &costs {
        need(entry.parameters, entry.defaults, attribute);
    }
    need(choice.parameters, choice.defaults, EFFORT);
    if let Some((d, _)) = &drift {
        need(d.parameters, d.defaults, EFFORT);
    }
    if learning.name != "none" {
        needed.push("initial_value".into());
        if forgetting {
            needed.push("forget_rate".into());
        }
    }
    let mut parameters = Vec::new();
    let mut variations = Vec::new();
    for (pname, value) in &declared {
        if !needed.contains(pname) {
            return Err(r.error(
                &format!("parameters.{pname}"),
                format!(
                    "not used by the components of this model (they use: {})",
                    needed.join(", ")
                ),
            ));
        }
        let (spec, variation) = r.parameter(pname, value)?;
        parameters.push(spec);
        variations.push(variation);
    }
    for pname in &needed {
        if parameters.iter().any(|p| p.name == *pname) {
            continue;
        }
        let Some(&x) = defaults.get(pname) else {
            return Err(r.error(
                &format!("parameters.{pname}"),
                "missing; the model's components need it",
            ));
        };
        parameters.push(ParameterSpec {
            name: pname.to_string(),
            lower: x,
            upper: x,
            start_range: (x, x),
            fixed: Some(x),
            prior: None,
            description: "default".into(),
        });
        variations.push(None);
    }
    let slot = |n: &str| {
        parameters
            .iter()
            .position(|p| p.name == n)
            .expect("every needed parameter is declared")
    };
    let learning_rule =
        (learning.build)(&learning_options, &slot).map_err(|m| r.error("learning", m))?;
    let mut cost_attributes = Vec::with_capacity(costs.len());
    for (attribute, entry, options) in &costs {
        let renamed = |n: &str| slot(&for_attribute(n, attribute));
        let shape = (entry.build)(options, &renamed).map_err(|m| r.error("cost", m))?;
        cost_attributes.push(super::CostAttribute {
            name: attribute.clone(),
            shape_name: entry.name,
            equation: entry.equation,
            shape,
        });
    }
    let choice_stage = (choice.build)(&choice_options, &slot).map_err(|m| r.error("choice", m))?;
    let drift_mapping = match &drift {
        Some((d, options)) => Some((d.build)(options, &slot).map_err(|m| r.error("drift", m))?),
        None => None,
    };
    let check_range = |pname: &str, lo: f64, hi: f64| -> Result<(), ModelError> {
        if let Some(p) = parameters.iter().find(|p| p.name == pname)
            && (p.lower < lo || p.upper > hi)
        {
            return Err(r.error(
                &format!("parameters.{pname}"),
                format!(
                    "bounds [{}, {}] must lie within [{lo}, {hi}]",
                    p.lower, p.upper
                ),
            ));
        }
        Ok(())
    };
    for rate in [
        "learning_rate",
        "gain_rate",
        "loss_rate",
        "forget_rate",
        "lapse",
        "gaze_discount",
        "collapse",
    ] {
        check_range(rate, 0.0, 1.0)?;
    }
    check_range("start", 1e-9, 1.0 - 1e-9)?;
    for positive in ["boundary", "threshold", "threshold_gap"] {
        check_range(positive, 1e-9, f64::INFINITY)?;
    }
    if choice.name == "ballistic-race" {
        // The rate's spread divides every quantity of the ballistic accumulator, and the start
        // range (the width of the uniform start below the threshold) divides its density.
        check_range("drift_sd", 1e-9, f64::INFINITY)?;
        check_range("start_range", 1e-9, f64::INFINITY)?;
    }
    for positive in ["half_time", "collapse_scale", "collapse_shape"] {
        check_range(positive, 1e-9, f64::INFINITY)?;
    }
    for non_negative in ["ndt", "drift_sd", "collapse_rate", "urgency", "leak"] {
        check_range(non_negative, 0.0, f64::INFINITY)?;
    }
    if choice.name == "diffusion" {
        check_diffusion_ranges(&parameters).map_err(|(key, message)| r.error(&key, message))?;
    }
    let forget_slot = (forgetting && learning.name != "none").then(|| slot("forget_rate"));
    for (spec, variation) in parameters.iter().zip(&variations) {
        let Some(variation) = variation else { continue };
        let key = format!("parameters.{}", spec.name);
        if spec.name == "initial_value" {
            return Err(r.error(
                &key,
                "the initial value is used once, before the first trial; it cannot vary over trials",
            ));
        }
        if spec.name == "ndt" && !variation.slopes.is_empty() {
            return Err(r.error(
                &format!("{key}.slopes"),
                "ndt is kept below each condition's fastest response, which a slope cannot \
                 guarantee; let ndt differ by a column's levels (`by`) instead",
            ));
        }
    }
    let component_parameters: Vec<String> = parameters.iter().map(|p| p.name.clone()).collect();
    let (parameters, sources) = varying::expand(parameters.into_iter().zip(variations).collect());
    let n_free = parameters.iter().filter(|p| p.is_free()).count();
    if n_free > super::dual::MAX_FREE {
        return Err(r.error(
            "parameters",
            format!(
                "{n_free} free parameters (levels and slopes included); at most {}",
                super::dual::MAX_FREE
            ),
        ));
    }
    Ok(Model {
        name,
        description,
        origin: origin.to_string(),
        text: text.to_string(),
        component_names: [
            learning.name,
            costs[0].1.name,
            drift.as_ref().map_or("-", |(d, _)| d.name),
            choice.name,
        ],
        equations: [
            learning.equation,
            costs[0].1.equation,
            drift.as_ref().map_or("", |(d, _)| d.equation),
            choice.equation,
        ],
        forget_slot,
        initial_slot: component_parameters
            .iter()
            .position(|p| p == "initial_value"),
        parameters,
        component_parameters,
        sources,
        learning: learning_rule,
        costs: cost_attributes,
        drift: drift_mapping,
        choice: choice_stage,
    })
}

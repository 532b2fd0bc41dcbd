//! Models: a registry of declarative model files combining a learning rule, an effort-cost shape,
//! a drift mapping and a choice stage, each a component of [`components`].
//!
//! Built-in models are the files in the crate's models/ folder, embedded at build time; a user
//! may pass any other file by path.

pub mod components;
pub mod dual;
pub mod params;
mod registry;
mod spec;
pub mod varying;

pub use params::{ParameterSpec, Prior, Transform};
pub use registry::{built_in_models, load_model};
pub use spec::{EFFORT, ModelError, for_attribute, parse_model};

use components::{ChoiceStage, CostShape, DriftMapping, LearningRule};

/// A checked model, ready for the likelihood.
pub struct Model {
    /// Model name.
    pub name: String,
    /// One-paragraph description.
    pub description: String,
    /// Where the definition came from: `built-in` or a file path.
    pub origin: String,
    /// The definition as written (recorded in run records).
    pub text: String,
    /// Names of the learning rule, cost shape, drift mapping (`-` when unused) and choice stage.
    pub component_names: [&'static str; 4],
    /// Equations of the four components with their sources.
    pub equations: [&'static str; 4],
    /// Every estimated (or fixed) parameter: declared ones in file order, a parameter that
    /// varies over trials replaced by its levels and slopes ([`varying`]), then defaults the
    /// components need.
    pub parameters: Vec<ParameterSpec>,
    /// The parameters the components use, by name, in the order of their slots.
    pub component_parameters: Vec<String>,
    /// Where each component parameter's value comes from on a trial.
    pub(crate) sources: Vec<varying::Source>,
    pub(crate) learning: Box<dyn LearningRule>,
    /// The cost attributes, applied in order: SV = f_n(…f_1(Q, E_1)…, E_n).
    pub costs: Vec<CostAttribute>,
    pub(crate) drift: Option<Box<dyn DriftMapping>>,
    pub(crate) choice: Box<dyn ChoiceStage>,
    pub(crate) forget_slot: Option<usize>,
    pub(crate) initial_slot: Option<usize>,
}

/// One cost attribute of a model: its name (the column prefix of the trial table), its shape.
pub struct CostAttribute {
    /// Attribute name: `effort` (columns effort_a, effort_b) or another (columns `<name>_a`, …).
    pub name: String,
    /// Name of the cost shape.
    pub shape_name: &'static str,
    /// Equation of the shape with its source (written for effort).
    pub equation: &'static str,
    pub(crate) shape: Box<dyn CostShape>,
}

impl CostAttribute {
    /// True for the canonical effort attribute.
    pub fn is_effort(&self) -> bool {
        self.name == spec::EFFORT
    }
}

impl std::fmt::Debug for Model {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Model")
            .field("name", &self.name)
            .field("components", &self.component_names)
            .field("parameters", &self.parameters)
            .finish()
    }
}

impl Model {
    /// Indices (into [`Model::parameters`]) of the free parameters, in order.
    pub fn free_slots(&self) -> Vec<usize> {
        (0..self.parameters.len())
            .filter(|&i| self.parameters[i].is_free())
            .collect()
    }

    /// The declared parameter called `name`.
    pub fn parameter(&self, name: &str) -> Option<&ParameterSpec> {
        self.parameters.iter().find(|p| p.name == name)
    }

    /// True when values are learned from outcomes (false: offered magnitudes).
    pub fn learns(&self) -> bool {
        self.learning.learns()
    }

    /// True when some parameter varies over trials (by condition or with covariates).
    pub fn varies(&self) -> bool {
        self.sources
            .iter()
            .any(|s| matches!(s, varying::Source::Varying(_)))
    }

    /// True when the component parameter at index `k` (of [`Model::component_parameters`])
    /// varies over trials.
    pub fn component_varies(&self, k: usize) -> bool {
        matches!(self.sources.get(k), Some(varying::Source::Varying(_)))
    }

    /// The component parameter (as named in [`Model::component_parameters`]) that the model
    /// parameter in `slot` belongs to: itself, or the parameter whose level or slope it is.
    pub fn component_parameter_of(&self, slot: usize) -> &str {
        let k = self
            .sources
            .iter()
            .position(|s| match s {
                varying::Source::Constant(c) => *c == slot,
                varying::Source::Varying(v) => {
                    v.levels.iter().any(|(_, s)| *s == slot)
                        || v.slopes.iter().any(|(_, s)| *s == slot)
                }
            })
            .expect("every model parameter belongs to a component parameter");
        &self.component_parameters[k]
    }

    /// What the choice stage reads of a trial's subjective values.
    pub fn signal(&self) -> components::Signal {
        self.choice.signal()
    }

    /// True when response times enter the likelihood.
    pub fn uses_response_times(&self) -> bool {
        self.choice.uses_response_times()
    }

    /// The same model with its choice stage on a coarser grid
    /// ([`ChoiceStage::on_coarser_grid`]), rebuilt from the model's text with this model's
    /// parameters; `None` for a stage in closed form, or a model its text does not rebuild
    /// (one assembled in code).
    pub fn on_coarser_grid(&self) -> Option<Model> {
        let choice = self.choice.on_coarser_grid()?;
        let mut coarse = parse_model(&self.text, &self.origin).ok()?;
        let same = coarse.component_parameters == self.component_parameters
            && coarse.parameters.len() == self.parameters.len()
            && coarse
                .parameters
                .iter()
                .zip(&self.parameters)
                .all(|(a, b)| a.name == b.name);
        if !same {
            return None;
        }
        coarse.name.clone_from(&self.name);
        coarse.parameters.clone_from(&self.parameters);
        coarse.choice = choice;
        Some(coarse)
    }
}

//! The test suite, one binary (so that polars and the crate are linked once, not once per file).
//! Each module checks one part of the main job against something outside the project, named
//! beside each check; shared helpers are in `common`.

mod common;

mod cli_errors;
mod data_errors;
mod exports;
mod first_passage_properties;
mod first_passage_reference;
mod first_passage_sampler;
mod fit_behaviour;
mod fit_folder;
mod fit_optima;
mod fitted_inputs;
mod full_diffusion;
mod group_prior_covariates;
mod group_statistics;
mod haemodynamic_response;
mod hierarchical;
mod honest_output;
mod likelihood;
mod likelihood_fast_path;
mod model_selection;
mod numerical_passage;
mod output_formats;
mod output_safety;
mod parameter_recovery;
mod plan;
mod power;
mod predictive_check;
mod race_models;
mod race_reference;
mod real_data;
mod report;
mod response_window;
mod resume;
mod shards;
mod task_shapes;

//! `valuedrift models`: the built-in models with their components, equations and parameters.

use crate::model::{Model, built_in_models, load_model};
use std::fmt::Write;

/// What `valuedrift models` prints for one model: name, origin, description, components with
/// their equations, and parameters with bounds, start ranges and priors.
pub fn description(model: &Model) -> String {
    let mut text = String::new();
    // Writing to a String cannot fail.
    let _ = write_description(&mut text, model);
    text
}

fn write_description(out: &mut String, model: &Model) -> std::fmt::Result {
    writeln!(out, "{}  ({})", model.name, model.origin)?;
    if !model.description.is_empty() {
        writeln!(out, "  {}", model.description)?;
    }
    let kinds = ["learning", "cost", "drift", "choice"];
    for ((kind, name), equation) in kinds.iter().zip(model.component_names).zip(model.equations) {
        if kind == &"cost" {
            // Every cost attribute, in the order applied.
            for cost in &model.costs {
                let label = format!("{} ({})", cost.shape_name, cost.name);
                writeln!(out, "  {kind:<9} {label:<20} {}", cost.equation)?;
            }
        } else if name != "-" {
            writeln!(out, "  {kind:<9} {name:<20} {equation}")?;
        }
    }
    for p in &model.parameters {
        match p.fixed {
            Some(x) => writeln!(out, "    {:<20} fixed at {x}", p.name)?,
            None => writeln!(
                out,
                "    {:<20} in [{}, {}], starts in [{}, {}]{}{}",
                p.name,
                p.lower,
                p.upper,
                p.start_range.0,
                p.start_range.1,
                p.prior
                    .as_ref()
                    .map_or(String::new(), |pr| format!(", prior {pr:?}")),
                if p.description.is_empty() {
                    String::new()
                } else {
                    format!(" — {}", p.description)
                }
            )?,
        }
    }
    Ok(())
}

/// Lists every built-in model, or describes one model (built-in name or file path).
pub fn run(name: Option<&str>) -> Result<(), Box<dyn std::error::Error>> {
    match name {
        Some(n) => print!("{}", description(&load_model(n)?)),
        None => {
            for model in built_in_models() {
                println!("{}", description(&model));
            }
        }
    }
    Ok(())
}

//! Built-in model files (embedded from models/ by build.rs) and loading by name or path.

use super::Model;
use super::spec::{ModelError, parse_model};
use std::path::Path;

include!(concat!(env!("OUT_DIR"), "/built_in_models.rs"));

/// Every built-in model, parsed, in file-name order.
pub fn built_in_models() -> Vec<Model> {
    BUILT_IN
        .iter()
        .map(|(file, text)| {
            parse_model(text, &format!("built-in models/{file}"))
                .expect("built-in models are checked by tests")
        })
        .collect()
}

/// A model by built-in name, or from a `.toml` file given by path.
pub fn load_model(name_or_path: &str) -> Result<Model, ModelError> {
    let path = Path::new(name_or_path);
    if name_or_path.ends_with(".toml") || path.exists() {
        let text = std::fs::read_to_string(path).map_err(|e| ModelError {
            origin: name_or_path.to_string(),
            key: "(file)".into(),
            message: format!("cannot be read: {e}"),
        })?;
        return parse_model(&text, name_or_path);
    }
    for (file, text) in BUILT_IN {
        if file.strip_suffix(".toml") == Some(name_or_path) {
            return parse_model(text, &format!("built-in models/{file}"));
        }
    }
    let known: Vec<&str> = BUILT_IN
        .iter()
        .filter_map(|(f, _)| f.strip_suffix(".toml"))
        .collect();
    Err(ModelError {
        origin: name_or_path.to_string(),
        key: "(model)".into(),
        message: format!(
            "no built-in model of that name and no such file (built-in: {})",
            known.join(", ")
        ),
    })
}

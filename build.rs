//! Embeds every models/*.toml file in the library, so that a new model file needs no code.

use std::fmt::Write;

fn main() {
    println!("cargo:rerun-if-changed=models");
    let mut files: Vec<String> = std::fs::read_dir("models")
        .expect("models/ folder")
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".toml"))
        .collect();
    files.sort();
    let mut out = String::from(
        "/// (file name, contents) of the built-in model files.\npub const BUILT_IN: &[(&str, &str)] = &[\n",
    );
    for f in &files {
        writeln!(
            out,
            "    ({f:?}, include_str!(concat!(env!(\"CARGO_MANIFEST_DIR\"), \"/models/{f}\"))),"
        )
        .unwrap();
    }
    out.push_str("];\n");
    let dest = std::path::Path::new(&std::env::var("OUT_DIR").unwrap()).join("built_in_models.rs");
    std::fs::write(dest, out).unwrap();
}

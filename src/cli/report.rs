//! `valuedrift report`: one self-contained HTML file of a fit folder and what sits beside it.

use crate::files::write_atomically;
use crate::report::{ReportInputs, build};
use std::path::Path;

/// Builds the report of `inputs` and writes it to `out` atomically.
pub fn run(
    inputs: &ReportInputs,
    out: &Path,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    if let Some(fits) = &inputs.fits
        && !fits.is_dir()
    {
        return Err(format!("--fits {}: not a folder", fits.display()).into());
    }
    crate::files::refuse_existing(out, replace)?;
    let page = build(inputs, super::RESEARCH_CAUTION)?;
    write_atomically(out, replace, |w| w.write_all(page.as_bytes()))?;
    println!("report in {} ({} KB)", out.display(), page.len() / 1024);
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}

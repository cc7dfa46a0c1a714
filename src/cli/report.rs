//! `lacuna report`: the self-contained HTML report from a compare folder.

use std::path::{Path, PathBuf};

use clap::Args;
use lacuna::output::write_atomic;
use lacuna::{LacunaError, Result};

const EXAMPLE: &str = "Example:
  lacuna report --compare comparison --epochs trials/epochs.json --out report.html

The page has no scripts and fetches nothing: open it offline, mail it, print it.
It defines every number it shows; `--help` (not -h) lists the same definitions.";

#[derive(Args, Debug)]
#[command(
    after_help = EXAMPLE,
    after_long_help = format!("{EXAMPLE}\n\n{}", lacuna::report::glossary::help_text(lacuna::report::glossary::COMPARE))
)]
pub struct ReportArgs {
    /// The output folder of `lacuna compare` (reads compare.json).
    #[arg(long, value_name = "DIR")]
    compare: PathBuf,
    /// The epochs.json of `lacuna extract`, for the dropout raster.
    #[arg(long, value_name = "epochs.json")]
    epochs: Option<PathBuf>,
    /// Where to write the HTML page.
    #[arg(long, value_name = "REPORT.html")]
    out: PathBuf,
}

/// Reads and parses a JSON file, naming it in errors.
pub fn read_json(path: &Path) -> Result<serde_json::Value> {
    lacuna::trials::io::require_regular(path)?;
    let text = std::fs::read_to_string(path).map_err(|source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    serde_json::from_str(&text).map_err(|e| LacunaError::Format {
        path: path.to_path_buf(),
        message: format!("not valid JSON: {e}"),
    })
}

pub fn run(a: ReportArgs) -> Result<i32> {
    let path = a.compare.join("compare.json");
    {
        let mut inputs: Vec<(&str, &Path)> = vec![("--compare (compare.json)", &path)];
        if let Some(e) = &a.epochs {
            inputs.push(("--epochs", e));
        }
        lacuna::output::check_paths(&inputs, &[("--out", &a.out)], &[])?;
    }
    let compare = read_json(&path)?;
    if compare["compare_version"].as_str() != Some("1") {
        return Err(LacunaError::Format {
            path,
            message: "not a compare.json of this lacuna version (compare_version \"1\" expected)"
                .into(),
        });
    }
    lacuna::report::compare_check::check_compare(&compare).map_err(|why| LacunaError::Format {
        path: path.clone(),
        message: format!("{why}; rerun `lacuna compare` to rebuild the folder"),
    })?;
    let epochs = match &a.epochs {
        Some(e) => {
            let doc = read_json(e)?;
            let channels: Vec<String> = compare["channels"]
                .as_array()
                .map(|a| {
                    a.iter()
                        .filter_map(|v| v.as_str().map(str::to_string))
                        .collect()
                })
                .unwrap_or_default();
            let n = compare["trials"].as_u64().unwrap_or(0) as usize;
            lacuna::report::epochs_check::check_epochs_match(&doc, &channels, n, None).map_err(
                |why| LacunaError::Format {
                    path: e.clone(),
                    message: format!("does not describe the trial set of {}: {why}; pass the epochs.json written with those covariances", path.display()),
                },
            )?;
            Some(doc)
        }
        None => None,
    };
    let html = lacuna::report::html::render(&compare, epochs.as_ref());
    write_atomic(&a.out, html.as_bytes())?;
    eprintln!("wrote {}", a.out.display());
    Ok(0)
}

//! `lacuna report`: the self-contained HTML report from a compare folder.

use std::path::{Path, PathBuf};

use clap::Args;
use lacuna::jobs::comparison::COMPARE_VERSION;
use lacuna::jobs::{Comparison, ExtractionRecord};
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

/// Reads a JSON file into a typed result, naming the file and what it
/// should have been in errors.
pub fn read_typed<T: serde::de::DeserializeOwned>(path: &Path, what: &str) -> Result<T> {
    lacuna::trials::io::require_regular(path)?;
    let text = std::fs::read_to_string(path).map_err(|source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    serde_json::from_str(&text).map_err(|e| LacunaError::Format {
        path: path.to_path_buf(),
        message: format!("not {what} of this lacuna version: {e}"),
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
    let compare: Comparison = read_typed(&path, "a compare.json")?;
    if compare.compare_version != COMPARE_VERSION {
        return Err(LacunaError::Format {
            path,
            message: format!(
                "not a compare.json of this lacuna version (compare_version \"{COMPARE_VERSION}\" expected, found \"{}\")",
                compare.compare_version
            ),
        });
    }
    compare.check().map_err(|why| LacunaError::Format {
        path: path.clone(),
        message: format!("{why}; rerun `lacuna compare` to rebuild the folder"),
    })?;
    // Beside the trial set, when not given: <compare's --covs folder>/epochs.json.
    let epochs_path = a.epochs.clone().or_else(|| epochs_beside(&compare));
    let epochs: Option<ExtractionRecord> = match &epochs_path {
        Some(e) => {
            let rec: ExtractionRecord = read_typed(e, "an epochs.json of `lacuna extract`")?;
            lacuna::report::epochs_check::check_epochs_match(
                &rec,
                &compare.channels,
                compare.trials,
                None,
            )
            .map_err(|why| LacunaError::Format {
                path: e.clone(),
                message: format!("does not describe the trial set of {}: {why}; pass the epochs.json written with those covariances", path.display()),
            })?;
            Some(rec)
        }
        None => None,
    };
    let html = lacuna::report::html::render(&compare, epochs.as_ref());
    write_atomic(&a.out, html.as_bytes())?;
    println!("wrote {}", a.out.display());
    match (&a.epochs, &epochs_path) {
        (None, Some(e)) => println!(
            "dropout raster from {} (found beside the trial set)",
            e.display()
        ),
        (None, None) => println!(
            "no dropout raster: give --epochs trials/epochs.json (written by `lacuna extract`) to draw it"
        ),
        _ => {}
    }
    Ok(0)
}

/// epochs.json in the folder of the covariance stack the comparison read,
/// when it is there (the layout `lacuna extract` writes).
fn epochs_beside(c: &Comparison) -> Option<PathBuf> {
    let covs = c.provenance.as_ref()?.inputs.first()?;
    let candidate = Path::new(&covs.path).parent()?.join("epochs.json");
    candidate.is_file().then_some(candidate)
}

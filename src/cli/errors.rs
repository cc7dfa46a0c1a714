//! Errors at the binary's edge: the library's typed errors become words
//! with flag suggestions, and exit codes (GUIDE §4: 1 output I/O, 2 usage,
//! 3 invalid input data, nothing written, 4 numerical failure).

use lacuna::LacunaError;
use lacuna::error::ProblemKind;

/// The exit code of an error.
pub fn exit_code(e: &LacunaError) -> i32 {
    match e {
        LacunaError::Read { .. }
        | LacunaError::Format { .. }
        | LacunaError::InvalidTrials { .. }
        | LacunaError::Unsupported(_)
        | LacunaError::NeverObserved { .. }
        | LacunaError::RankDeficient { .. } => 3,
        LacunaError::InvalidOption(_)
        | LacunaError::OutOfRange { .. }
        | LacunaError::UnknownName { .. }
        | LacunaError::MissingSetting { .. } => 2,
        LacunaError::Numerical(_) => 4,
        LacunaError::Write { .. } => 1,
        LacunaError::InGroup { source, .. } => exit_code(source),
        LacunaError::OnProcess { exit_code, .. } => *exit_code,
    }
}

/// The command-line flag of a library setting (`max_iter` → `--max-iter`).
pub fn flag(setting: &str) -> String {
    format!("--{}", setting.replace('_', "-"))
}

/// The message for the command line: settings named by their flags, and
/// advice on what to do next.
pub fn describe(e: &LacunaError) -> String {
    match e {
        LacunaError::OutOfRange {
            setting,
            value,
            allowed,
        } => format!("{} must be {allowed}, got {value}", flag(setting)),
        LacunaError::UnknownName {
            setting,
            value,
            valid,
            closest,
        } => {
            let hint = closest
                .as_ref()
                .map(|n| format!(" (did you mean '{n}'?)"))
                .unwrap_or_default();
            format!(
                "{} '{value}' is not valid{hint}. Valid names: {}",
                flag(setting),
                valid.join(", ")
            )
        }
        LacunaError::MissingSetting {
            setting,
            needed_for,
        } => format!("{needed_for} needs {}", flag(setting)),
        LacunaError::NeverObserved { .. } => {
            format!("{e}. Remove it, or pass --drop-unobserved to leave it out of the mean")
        }
        LacunaError::RankDeficient { .. } => format!(
            "{e}. Regularise first (--regularize shrinkage:0.1, loading:0.01, or oas with --samples T), or choose a scheme that takes such windows: shrinkage, diagonal-loading, gaussian-em, available-case, subspace"
        ),
        LacunaError::InvalidTrials { problems, .. }
            if problems.iter().any(|p| p.kind == ProblemKind::Indefinite) =>
        {
            format!(
                "{e}\nhint: windows shorter than the channel count, average referencing and interpolation make covariances singular; estimate them with shrinkage from the recordings (`lacuna extract --estimator oas`), or mark the dependent channel as unobserved in the mask"
            )
        }
        LacunaError::InGroup { group, source } => format!("group '{group}': {}", describe(source)),
        _ => e.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: a setting's error names its flag, the
    // code follows GUIDE §4.
    #[test]
    fn settings_become_flags() {
        let e = LacunaError::OutOfRange {
            setting: "max_iter".into(),
            value: "0".into(),
            allowed: "between 1 and 1000000".into(),
        };
        assert_eq!(
            describe(&e),
            "--max-iter must be between 1 and 1000000, got 0"
        );
        assert_eq!(exit_code(&e), 2);
        let e = LacunaError::UnknownName {
            setting: "scheme".into(),
            value: "airm-observd".into(),
            valid: vec!["airm-observed".into()],
            closest: Some("airm-observed".into()),
        };
        assert!(
            describe(&e)
                .contains("--scheme 'airm-observd' is not valid (did you mean 'airm-observed'?)")
        );
        let e = LacunaError::NeverObserved {
            channel: "Cz".into(),
            count: 1,
        };
        assert!(describe(&e).contains("--drop-unobserved"));
        assert_eq!(exit_code(&e), 3);
    }
}

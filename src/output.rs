//! Safe writes: nothing half-written under a final name, nothing written
//! through a link or onto a device, no output that overwrites an input.
//!
//! - [`write_atomic`]: a temporary file created exclusively (`O_EXCL`, so a
//!   planted file or symlink at the temporary name makes it fail instead of
//!   writing through it) in the target folder, written, fsynced, renamed.
//!   An existing final name that is not a regular file (symlink, device,
//!   FIFO, folder) is refused.
//! - [`write_folder`]: a multi-file output is written into a fresh temporary
//!   folder beside the target and renamed into place; a previous folder of
//!   that name is replaced only once the new one is complete.
//! - [`check_paths`]: refuses an output equal to an input or to another
//!   output (compared after resolving links and `..`).
//!
//! Temporary names carry the writer's PID; a later write to the same target
//! removes those left by processes that no longer run (killed mid-write).

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{LacunaError, Result};

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// Longest file name most file systems accept, in bytes.
const NAME_MAX: usize = 255;

/// A unique hidden sibling name for `path` (`.NAME.PID.N.partial`), with the
/// visible part shortened so the whole name stays within 255 bytes.
fn temp_sibling(path: &Path, suffix: &str) -> PathBuf {
    let dir = parent_of(path);
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default();
    let tail = format!(
        ".{}.{}.{suffix}",
        std::process::id(),
        COUNTER.fetch_add(1, Ordering::Relaxed)
    );
    let room = NAME_MAX - 1 - tail.len();
    let mut short = String::new();
    for ch in name.chars() {
        if short.len() + ch.len_utf8() > room {
            break;
        }
        short.push(ch);
    }
    dir.join(format!(".{short}{tail}"))
}

fn parent_of(path: &Path) -> &Path {
    path.parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."))
}

/// Refuses a final name that exists and is not a regular file.
fn check_target_file(path: &Path) -> Result<()> {
    match std::fs::symlink_metadata(path) {
        Ok(m) if m.file_type().is_symlink() => Err(LacunaError::InvalidOption(format!(
            "{}: the output is a symbolic link; lacuna does not write through links. Remove it or choose another name",
            path.display()
        ))),
        Ok(m) if !m.file_type().is_file() => Err(LacunaError::InvalidOption(format!(
            "{}: the output exists and is not a regular file (folder, device or pipe); choose another name",
            path.display()
        ))),
        _ => Ok(()),
    }
}

/// Removes temporary files and folders that an earlier lacuna process left
/// beside `path` when it was killed (`.NAME.PID.N.partial` / `.old` whose PID
/// no longer runs). Only names of exactly our pattern are touched.
fn sweep_orphans(path: &Path) {
    let Some(name) = path.file_name().map(|n| n.to_string_lossy().to_string()) else {
        return;
    };
    let Ok(entries) = std::fs::read_dir(parent_of(path)) else {
        return;
    };
    let prefix = format!(".{name}.");
    for e in entries.flatten() {
        let f = e.file_name().to_string_lossy().to_string();
        let Some(rest) = f.strip_prefix(&prefix) else {
            continue;
        };
        let parts: Vec<&str> = rest.split('.').collect();
        let [pid, n, kind] = parts.as_slice() else {
            continue;
        };
        let (Ok(pid), Ok(_)) = (pid.parse::<u32>(), n.parse::<u64>()) else {
            continue;
        };
        if !(*kind == "partial" || *kind == "old")
            || pid == std::process::id()
            || Path::new(&format!("/proc/{pid}")).exists()
        {
            continue;
        }
        let p = e.path();
        match std::fs::symlink_metadata(&p) {
            Ok(m) if m.is_dir() => {
                let _ = std::fs::remove_dir_all(&p);
            }
            Ok(m) if m.is_file() => {
                let _ = std::fs::remove_file(&p);
            }
            _ => {}
        }
    }
}

/// Pretty JSON of a typed result, with a final newline.
pub fn json_bytes<T: serde::Serialize>(value: &T) -> Vec<u8> {
    // Our result types have string keys only, so serialising cannot fail;
    // non-finite numbers become null (see `crate::nullable`).
    let mut v = serde_json::to_vec_pretty(value).unwrap_or_default();
    v.push(b'\n');
    v
}

/// Writes `bytes` to `path` atomically (see the module documentation).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    check_target_file(path)?;
    sweep_orphans(path);
    let tmp = temp_sibling(path, "partial");
    let result = (|| {
        let mut f = std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if result.is_err() {
        // Only remove what we created: create_new failed if it existed.
        if std::fs::symlink_metadata(&tmp).is_ok_and(|m| m.file_type().is_file()) {
            let _ = std::fs::remove_file(&tmp);
        }
    }
    result.map_err(|source| LacunaError::Write {
        path: path.to_path_buf(),
        source,
    })
}

/// Writes a folder of files (`relative path`, bytes) all-or-nothing: into a
/// fresh temporary folder beside `dir`, then renamed to `dir`. An existing
/// `dir` must be a folder (not a link) holding only names this output
/// writes (a previous run's); it is then replaced.
pub fn write_folder(dir: &Path, files: &[(PathBuf, Vec<u8>)]) -> Result<()> {
    let werr = |path: &Path, source| LacunaError::Write {
        path: path.to_path_buf(),
        source,
    };
    match std::fs::symlink_metadata(dir) {
        Ok(m) if m.file_type().is_symlink() || !m.is_dir() => {
            return Err(LacunaError::InvalidOption(format!(
                "{}: the output folder exists and is not a folder (or is a link); choose another name",
                dir.display()
            )));
        }
        Ok(_) => {
            // Replace only a folder of our own outputs: anything else in it
            // would be lost with the swap.
            let ours: std::collections::BTreeSet<std::ffi::OsString> = files
                .iter()
                .filter_map(|(rel, _)| rel.components().next())
                .map(|c| c.as_os_str().to_os_string())
                .collect();
            let entries = std::fs::read_dir(dir).map_err(|e| werr(dir, e))?;
            for entry in entries {
                let name = entry.map_err(|e| werr(dir, e))?.file_name();
                if !ours.contains(&name) {
                    return Err(LacunaError::InvalidOption(format!(
                        "{}: the output folder holds '{}', which this command does not write; lacuna replaces its output folder as a whole, so choose a new or empty folder",
                        dir.display(),
                        name.to_string_lossy()
                    )));
                }
            }
        }
        Err(_) => {}
    }
    if let Some(p) = dir.parent().filter(|p| !p.as_os_str().is_empty()) {
        std::fs::create_dir_all(p).map_err(|e| werr(p, e))?;
    }
    sweep_orphans(dir);
    let tmp = temp_sibling(dir, "partial");
    let result = (|| -> Result<()> {
        std::fs::create_dir(&tmp).map_err(|e| werr(&tmp, e))?;
        for (rel, bytes) in files {
            let path = tmp.join(rel);
            if let Some(p) = path.parent() {
                std::fs::create_dir_all(p).map_err(|e| werr(p, e))?;
            }
            let mut f = std::fs::OpenOptions::new()
                .write(true)
                .create_new(true)
                .open(&path)
                .map_err(|e| werr(&path, e))?;
            f.write_all(bytes).map_err(|e| werr(&path, e))?;
            f.sync_all().map_err(|e| werr(&path, e))?;
        }
        // Swap: the old folder (if any) moves aside, the new one in, the old is removed.
        let old = temp_sibling(dir, "old");
        let had_old = dir.exists();
        if had_old {
            std::fs::rename(dir, &old).map_err(|e| werr(dir, e))?;
        }
        if let Err(e) = std::fs::rename(&tmp, dir) {
            if had_old {
                let _ = std::fs::rename(&old, dir);
            }
            return Err(werr(dir, e));
        }
        if had_old {
            let _ = std::fs::remove_dir_all(&old);
        }
        Ok(())
    })();
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&tmp);
    }
    result
}

/// Writes the outputs of one command together: files under `folder` (if
/// given) go into it as a whole ([`write_folder`]), others are written
/// atomically. Everything is encoded before this is called; the separate
/// files are staged under temporary names first and renamed only after the
/// folder is in place, so a failure leaves the previous outputs untouched.
pub fn write_outputs(folder: Option<&Path>, files: Vec<(PathBuf, Vec<u8>)>) -> Result<()> {
    let mut inside = Vec::new();
    let mut outside = Vec::new();
    for (path, bytes) in files {
        match folder.and_then(|f| path.strip_prefix(f).ok()) {
            Some(rel) => inside.push((rel.to_path_buf(), bytes)),
            None => outside.push((path, bytes)),
        }
    }
    let mut staged: Vec<(PathBuf, PathBuf)> = Vec::new();
    let cleanup = |staged: &[(PathBuf, PathBuf)]| {
        for (tmp, _) in staged {
            let _ = std::fs::remove_file(tmp);
        }
    };
    for (path, bytes) in &outside {
        check_target_file(path)?;
        sweep_orphans(path);
        let tmp = temp_sibling(path, "partial");
        let r = (|| {
            let mut f = std::fs::OpenOptions::new()
                .write(true)
                .create_new(true)
                .open(&tmp)?;
            f.write_all(bytes)?;
            f.sync_all()
        })();
        if let Err(source) = r {
            cleanup(&staged);
            return Err(LacunaError::Write {
                path: path.clone(),
                source,
            });
        }
        staged.push((tmp, path.clone()));
    }
    if let Some(f) = folder
        && let Err(e) = write_folder(f, &inside)
    {
        cleanup(&staged);
        return Err(e);
    }
    for (tmp, path) in &staged {
        std::fs::rename(tmp, path).map_err(|source| LacunaError::Write {
            path: path.clone(),
            source,
        })?;
    }
    Ok(())
}

/// Resolves a path for comparison: canonical when it exists, else its
/// canonical parent joined with its name.
fn resolved(path: &Path) -> PathBuf {
    if let Ok(c) = std::fs::canonicalize(path) {
        return c;
    }
    let parent = std::fs::canonicalize(parent_of(path)).unwrap_or_else(|_| parent_of(path).into());
    parent.join(path.file_name().unwrap_or_default())
}

/// Refuses an output that is an input, or that two outputs share a path.
/// `inputs` and `outputs` pair each path with the option that named it. A
/// folder output also refuses inputs inside it that it would replace
/// (`folder_outputs`).
pub fn check_paths(
    inputs: &[(&str, &Path)],
    outputs: &[(&str, &Path)],
    folder_outputs: &[(&str, &Path)],
) -> Result<()> {
    let ins: Vec<(&str, PathBuf)> = inputs.iter().map(|(o, p)| (*o, resolved(p))).collect();
    let mut seen: Vec<(&str, PathBuf)> = Vec::new();
    for (opt, p) in outputs.iter().chain(folder_outputs) {
        let r = resolved(p);
        if let Some((iopt, _)) = ins.iter().find(|(_, i)| *i == r) {
            return Err(LacunaError::InvalidOption(format!(
                "{opt} {} is also the input {iopt}: writing it would destroy the input. Choose another output name",
                p.display()
            )));
        }
        if let Some((o2, _)) = seen.iter().find(|(_, s)| *s == r) {
            return Err(LacunaError::InvalidOption(format!(
                "{opt} and {o2} name the same file {}; give each output its own name",
                p.display()
            )));
        }
        seen.push((opt, r));
    }
    for (opt, dir) in folder_outputs {
        let r = resolved(dir);
        if let Some((iopt, i)) = ins.iter().find(|(_, i)| i.starts_with(&r)) {
            return Err(LacunaError::InvalidOption(format!(
                "{opt} {} would replace the folder holding the input {iopt} ({}); choose another output folder",
                dir.display(),
                i.display()
            )));
        }
        for (o, p) in outputs {
            if resolved(p).starts_with(&r) {
                return Err(LacunaError::InvalidOption(format!(
                    "{o} {} lies inside the output folder {opt} {}, which is replaced as a whole; write it elsewhere",
                    p.display(),
                    dir.display()
                )));
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tmpdir(name: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("lacuna-out-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    // Common practice, no source: a symlink at the final name is never written
    // through; a planted file or link at the temporary name makes the write
    // fail (O_EXCL) instead of following it; long names still work.
    #[test]
    fn never_writes_through_links() {
        let d = tmpdir("links");
        let victim = d.join("victim.txt");
        std::fs::write(&victim, b"keep").unwrap();
        let link = d.join("out.npy");
        std::os::unix::fs::symlink(&victim, &link).unwrap();
        assert!(write_atomic(&link, b"new").is_err());
        assert_eq!(std::fs::read(&victim).unwrap(), b"keep");
        assert!(
            std::fs::symlink_metadata(&link)
                .unwrap()
                .file_type()
                .is_symlink()
        );
        let long = d.join("x".repeat(254));
        write_atomic(&long, b"ok").unwrap();
        assert_eq!(std::fs::read(&long).unwrap(), b"ok");
        assert!(write_atomic(Path::new("/dev/null"), b"x").is_err());
        let _ = std::fs::remove_dir_all(&d);
    }

    #[test]
    fn outputs_equal_to_inputs_are_refused() {
        let d = tmpdir("same");
        let a = d.join("a.npy");
        std::fs::write(&a, b"x").unwrap();
        let b = d.join("sub/../a.npy");
        std::fs::create_dir_all(d.join("sub")).unwrap();
        assert!(check_paths(&[("--covs", &a)], &[("--out", &b)], &[]).is_err());
        let r = d.join("r.json");
        assert!(check_paths(&[("--covs", &a)], &[("--out", &r), ("--report", &r)], &[]).is_err());
        assert!(check_paths(&[("--covs", &a)], &[], &[("--out", &d)]).is_err());
        assert!(check_paths(&[("--covs", &a)], &[("--out", &r)], &[]).is_ok());
        let _ = std::fs::remove_dir_all(&d);
    }
}

//! One mean per condition, per session, or per (session, condition): the
//! mean job run on each group's trials, the affine-invariant distances
//! between the group means, and — when sessions are involved — a grand mean
//! of the session means.
//!
//! The grand mean is the masked Riemannian mean taken over the session means
//! themselves, each "observing" the channels its session estimated (so a
//! channel missing from a whole session is simply unobserved there; with
//! every channel in every session it is their Karcher mean). Each session
//! mean weighs by its trial count (default) or equally. It answers "the
//! centre of the sessions", not "the mean of all trials pooled": the two
//! differ when sessions differ in size or spread (docs/sessions.md).

use serde::{Deserialize, Serialize};

use super::{MeanJob, MeanRun};
use crate::error::{LacunaError, Result};
use crate::schemes::{AirmObserved, AveragingScheme, SchemeOptions};
use crate::spd::Mat;
use crate::trials::{Trial, TrialSet};

/// What the trials are grouped by.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum GroupBy {
    /// One mean per label (condition, class).
    #[serde(rename = "label")]
    Label,
    /// One mean per session.
    #[serde(rename = "session")]
    Session,
    /// One mean per (session, label) pair.
    #[serde(rename = "session+label")]
    SessionLabel,
}

impl GroupBy {
    pub const ALL: [GroupBy; 3] = [GroupBy::Label, GroupBy::Session, GroupBy::SessionLabel];

    /// Name on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            GroupBy::Label => "label",
            GroupBy::Session => "session",
            GroupBy::SessionLabel => "session+label",
        }
    }

    /// Parses a name, or says which names are valid.
    pub fn from_name(s: &str) -> Result<Self> {
        Self::ALL
            .into_iter()
            .find(|g| g.name() == s)
            .ok_or_else(|| LacunaError::UnknownName {
                setting: "by".into(),
                value: s.into(),
                valid: Self::ALL.iter().map(|g| g.name().to_string()).collect(),
                closest: None,
            })
    }

    fn uses_sessions(self) -> bool {
        self != GroupBy::Label
    }
}

/// How session means weigh in the grand mean.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum GrandWeighting {
    /// By the session's trial count (a session of 200 trials counts twice
    /// one of 100): closest to pooling, without letting one session's
    /// spread dominate the centre.
    Trials,
    /// Every session alike.
    Equal,
}

impl GrandWeighting {
    pub const ALL: [GrandWeighting; 2] = [GrandWeighting::Trials, GrandWeighting::Equal];

    pub fn name(self) -> &'static str {
        match self {
            GrandWeighting::Trials => "trials",
            GrandWeighting::Equal => "equal",
        }
    }

    pub fn from_name(s: &str) -> Result<Self> {
        Self::ALL
            .into_iter()
            .find(|g| g.name() == s)
            .ok_or_else(|| LacunaError::UnknownName {
                setting: "grand".into(),
                value: s.into(),
                valid: Self::ALL.iter().map(|g| g.name().to_string()).collect(),
                closest: None,
            })
    }
}

/// Progress: `(group name, groups done, groups)`, called before each group.
pub type GroupProgress = dyn Fn(&str, usize, usize) + Sync;

/// Settings: the mean job run in every group, the grouping, the grand mean's weighting.
#[derive(Debug, Clone)]
pub struct GroupedMeanJob {
    pub mean: MeanJob,
    pub by: GroupBy,
    pub grand: GrandWeighting,
}

/// One group's trials and its mean.
pub struct Group {
    /// `label`, `session` or `session/label`.
    pub name: String,
    pub label: Option<String>,
    pub session: Option<String>,
    /// Indices of the group's trials in the input set.
    pub trials: Vec<usize>,
    pub run: MeanRun,
    /// The mean on the input's channels (NaN rows/columns for channels this
    /// group left out or did not estimate).
    pub mean: Mat,
}

/// A grand mean over session means.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct GrandMean {
    /// `all sessions`, or the label whose session means it averages.
    pub name: String,
    pub label: Option<String>,
    pub sessions: Vec<String>,
    /// Normalised weights of the session means, in the order of `sessions`.
    pub weights: Vec<f64>,
    pub weighting: GrandWeighting,
    pub converged: bool,
    pub iterations: usize,
    /// p×p, NaN where no session estimated the pair.
    #[serde(skip)]
    pub mean: Option<Mat>,
}

/// Everything a grouped run produced.
pub struct GroupedMeans {
    pub by: GroupBy,
    pub channels: Vec<String>,
    pub groups: Vec<Group>,
    /// Affine-invariant distance between group means on the channels both
    /// estimated (None when they share fewer than one channel).
    pub distances: Vec<Vec<Option<f64>>>,
    pub grand: Vec<GrandMean>,
}

impl GroupedMeans {
    /// Every group's mean converged and every grand mean too.
    pub fn converged(&self) -> bool {
        self.groups.iter().all(|g| g.run.converged()) && self.grand.iter().all(|g| g.converged)
    }
}

impl GroupedMeanJob {
    /// Groups the trials of `set` and runs the mean job on each group.
    /// `progress(group, done, total)` is called before each group.
    pub fn run(&self, set: &TrialSet, progress: Option<&GroupProgress>) -> Result<GroupedMeans> {
        self.mean.options(None)?;
        let keys = group_keys(set, self.by)?;
        let mut order: Vec<(Option<String>, Option<String>)> = Vec::new();
        for k in &keys {
            if !order.contains(k) {
                order.push(k.clone());
            }
        }
        let p = set.n_channels();
        let mut groups = Vec::with_capacity(order.len());
        for (g, key) in order.iter().enumerate() {
            let name = match key {
                (Some(s), Some(l)) => format!("{s}/{l}"),
                (Some(s), None) => s.clone(),
                (None, Some(l)) => l.clone(),
                (None, None) => unreachable!("every trial has a key"),
            };
            if let Some(f) = progress {
                f(&name, g, order.len());
            }
            let idx: Vec<usize> = (0..set.len()).filter(|&i| &keys[i] == key).collect();
            let sub = set.select_trials(&idx)?;
            let run = self.mean.run(sub, None).map_err(|e| LacunaError::InGroup {
                group: name.clone(),
                source: Box::new(e),
            })?;
            let mean = embed(&run, set.channels());
            groups.push(Group {
                name,
                session: key.0.clone(),
                label: key.1.clone(),
                trials: idx,
                run,
                mean,
            });
        }
        // A mean is at distance 0 from itself exactly (not up to rounding).
        let distances = (0..groups.len())
            .map(|i| {
                (0..groups.len())
                    .map(|j| match i.cmp(&j) {
                        std::cmp::Ordering::Equal => Some(0.0),
                        _ => distance_on_shared(&groups[i.min(j)].mean, &groups[i.max(j)].mean),
                    })
                    .collect()
            })
            .collect();
        let grand = match self.by {
            GroupBy::Label => Vec::new(),
            GroupBy::Session => vec![grand_mean(
                "all sessions",
                None,
                &groups.iter().collect::<Vec<_>>(),
                self.grand,
                &self.mean,
                set.channels(),
            )?],
            GroupBy::SessionLabel => {
                let mut labels: Vec<&String> = Vec::new();
                for g in &groups {
                    let l = g.label.as_ref().expect("session+label groups have labels");
                    if !labels.contains(&l) {
                        labels.push(l);
                    }
                }
                labels
                    .into_iter()
                    .map(|l| {
                        let of_label: Vec<&Group> = groups
                            .iter()
                            .filter(|g| g.label.as_ref() == Some(l))
                            .collect();
                        grand_mean(
                            l,
                            Some(l),
                            &of_label,
                            self.grand,
                            &self.mean,
                            set.channels(),
                        )
                    })
                    .collect::<Result<Vec<_>>>()?
            }
        };
        debug_assert!(groups.iter().all(|g| g.mean.nrows() == p));
        Ok(GroupedMeans {
            by: self.by,
            channels: set.channels().to_vec(),
            groups,
            distances,
            grand,
        })
    }
}

/// Each trial's (session, label) key for the grouping; an error names the
/// first trial without the needed label or session.
fn group_keys(set: &TrialSet, by: GroupBy) -> Result<Vec<(Option<String>, Option<String>)>> {
    let labels = match by {
        GroupBy::Session => None,
        _ => Some(
            set.labels
                .as_ref()
                .ok_or_else(|| LacunaError::MissingSetting {
                    setting: "labels".into(),
                    needed_for: format!("grouping by {}", by.name()),
                })?,
        ),
    };
    let sessions = if by.uses_sessions() {
        Some(
            set.sessions
                .as_ref()
                .ok_or_else(|| LacunaError::MissingSetting {
                    setting: "labels".into(),
                    needed_for: format!(
                        "grouping by {} (a labels file with a `session` column)",
                        by.name()
                    ),
                })?,
        )
    } else {
        None
    };
    (0..set.len())
        .map(|i| {
            let get = |v: Option<&Vec<String>>, what: &str| -> Result<Option<String>> {
                match v {
                    None => Ok(None),
                    Some(v) if v[i].trim().is_empty() => Err(LacunaError::trial(
                        Some(i),
                        None,
                        format!("has no {what} (an empty cell): every trial needs one to be grouped by {}", by.name()),
                    )),
                    Some(v) => Ok(Some(v[i].clone())),
                }
            };
            Ok((get(sessions, "session")?, get(labels, "label")?))
        })
        .collect()
}

/// A group's mean on the input's channels: NaN for channels the group's run
/// dropped (never observed there) or did not estimate.
pub(crate) fn embed(run: &MeanRun, channels: &[String]) -> Mat {
    let published = run.result.published();
    let at: Vec<Option<usize>> = channels
        .iter()
        .map(|c| run.set.channels().iter().position(|d| d == c))
        .collect();
    let p = channels.len();
    Mat::from_fn(p, p, |a, b| match (at[a], at[b]) {
        (Some(i), Some(j)) => published[(i, j)],
        _ => f64::NAN,
    })
}

/// Channels with a finite variance in `m`.
fn estimated(m: &Mat) -> Vec<usize> {
    (0..m.nrows()).filter(|&c| m[(c, c)].is_finite()).collect()
}

/// Affine-invariant distance on the channels both means estimated.
fn distance_on_shared(a: &Mat, b: &Mat) -> Option<f64> {
    let ea = estimated(a);
    let shared: Vec<usize> = estimated(b)
        .into_iter()
        .filter(|c| ea.contains(c))
        .collect();
    if shared.is_empty() {
        return None;
    }
    let sa = crate::spd::sub_block(a, &shared);
    let sb = crate::spd::sub_block(b, &shared);
    Some(crate::spd::airm_distance(&sa, &sb))
}

/// The masked Riemannian mean of the given groups' means (each observing
/// the channels it estimated), weighted by trial count or equally.
fn grand_mean(
    name: &str,
    label: Option<&String>,
    groups: &[&Group],
    weighting: GrandWeighting,
    job: &MeanJob,
    channels: &[String],
) -> Result<GrandMean> {
    let sessions: Vec<String> = groups
        .iter()
        .map(|g| g.session.clone().unwrap_or_default())
        .collect();
    let raw: Vec<f64> = groups
        .iter()
        .map(|g| match weighting {
            GrandWeighting::Trials => g.trials.len() as f64,
            GrandWeighting::Equal => 1.0,
        })
        .collect();
    let total: f64 = raw.iter().sum();
    let weights: Vec<f64> = raw.iter().map(|w| w / total).collect();
    let trials: Vec<Trial> = groups
        .iter()
        .map(|g| {
            let observed = estimated(&g.mean);
            Trial {
                block: crate::spd::sub_block(&g.mean, &observed),
                observed,
            }
        })
        .collect();
    let context = |e: LacunaError| LacunaError::InGroup {
        group: format!("grand mean of {name}"),
        source: Box::new(e),
    };
    let set = TrialSet::new(
        channels.to_vec(),
        trials,
        Some(weights.clone()),
        "session means",
    )
    .map_err(context)?;
    let options = SchemeOptions {
        stop: crate::solve::StopRule {
            tol: job.tol,
            max_iter: job.max_iter.unwrap_or(500),
        },
        ..SchemeOptions::default()
    };
    // A channel no session estimated stays NaN, like in the session means.
    let ident = crate::diagnose::identifiability(&set);
    let (set, kept) = if ident.never_observed.is_empty() {
        (set, (0..channels.len()).collect::<Vec<_>>())
    } else {
        let kept: Vec<usize> = (0..channels.len())
            .filter(|c| !ident.never_observed.contains(c))
            .collect();
        (
            set.without_channels(&ident.never_observed)
                .map_err(context)?,
            kept,
        )
    };
    let r = AirmObserved.average(&set, &options).map_err(context)?;
    let published = r.published();
    let p = channels.len();
    let mut mean = Mat::from_element(p, p, f64::NAN);
    for (i, &a) in kept.iter().enumerate() {
        for (j, &b) in kept.iter().enumerate() {
            mean[(a, b)] = published[(i, j)];
        }
    }
    Ok(GrandMean {
        name: name.to_string(),
        label: label.cloned(),
        sessions,
        weights,
        weighting,
        converged: r.diagnostics.converged,
        iterations: r.diagnostics.iterations,
        mean: Some(mean),
    })
}

/// Format version of groups.json.
pub const GROUPS_VERSION: &str = "1";

/// One group's entry in groups.json.
#[derive(Debug, Serialize)]
pub struct GroupEntry<'a> {
    pub name: &'a str,
    pub label: Option<&'a str>,
    pub session: Option<&'a str>,
    pub trials: usize,
    /// The mean's file names inside the output folder (NPY and CSV).
    pub files: [String; 2],
    pub report: crate::report::json::MeanReport<'a>,
}

/// One grand mean's entry in groups.json.
#[derive(Debug, Serialize)]
pub struct GrandEntry<'a> {
    #[serde(flatten)]
    pub grand: &'a GrandMean,
    pub files: [String; 2],
}

/// What `lacuna mean --by …` writes to groups.json.
#[derive(Debug, Serialize)]
pub struct GroupedReport<'a> {
    pub groups_version: &'static str,
    pub lacuna_version: &'static str,
    pub caution: &'static str,
    pub by: GroupBy,
    pub channels: &'a [String],
    pub groups: Vec<GroupEntry<'a>>,
    /// Group names, then the affine-invariant distances between their means
    /// on the channels both estimated (null where they share none).
    pub distances: GroupDistances<'a>,
    pub grand: Vec<GrandEntry<'a>>,
    pub provenance: Option<crate::report::provenance::Provenance>,
}

#[derive(Debug, Serialize)]
pub struct GroupDistances<'a> {
    pub groups: Vec<&'a str>,
    pub matrix: &'a [Vec<Option<f64>>],
}

impl GroupedMeans {
    /// File stems for the group means and grand means, safe in any file
    /// system and distinct: letters, digits, `-`, `_` and `.` kept, anything
    /// else `_`; a stem already taken gets `-2`, `-3`, ….
    pub fn file_stems(&self) -> (Vec<String>, Vec<String>) {
        let mut taken: Vec<String> = vec!["groups".into(), "distances".into()];
        let mut stem = |raw: &str| {
            let mut s: String = raw
                .chars()
                .map(|c| {
                    if c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.') {
                        c
                    } else {
                        '_'
                    }
                })
                .collect();
            // No hidden files, no `..`.
            s = s.trim_start_matches('.').to_string();
            if s.is_empty() {
                s = "group".into();
            }
            s.truncate(100);
            let base = s.clone();
            let mut k = 2;
            while taken.iter().any(|t| t.eq_ignore_ascii_case(&s)) {
                s = format!("{base}-{k}");
                k += 1;
            }
            taken.push(s.clone());
            s
        };
        let groups = self
            .groups
            .iter()
            .map(|g| stem(&format!("mean-{}", g.name)))
            .collect();
        let grand = self
            .grand
            .iter()
            .map(|g| stem(&format!("grand-{}", g.name)))
            .collect();
        (groups, grand)
    }

    /// The report for groups.json.
    pub fn report(
        &self,
        provenance: Option<crate::report::provenance::Provenance>,
    ) -> GroupedReport<'_> {
        let (stems, grand_stems) = self.file_stems();
        let files = |s: &String| [format!("{s}.npy"), format!("{s}.csv")];
        GroupedReport {
            groups_version: GROUPS_VERSION,
            lacuna_version: env!("CARGO_PKG_VERSION"),
            caution: super::comparison::CAUTION,
            by: self.by,
            channels: &self.channels,
            groups: self
                .groups
                .iter()
                .zip(&stems)
                .map(|(g, s)| GroupEntry {
                    name: &g.name,
                    label: g.label.as_deref(),
                    session: g.session.as_deref(),
                    trials: g.trials.len(),
                    files: files(s),
                    report: g.run.report(None),
                })
                .collect(),
            distances: GroupDistances {
                groups: self.groups.iter().map(|g| g.name.as_str()).collect(),
                matrix: &self.distances,
            },
            grand: self
                .grand
                .iter()
                .zip(&grand_stems)
                .map(|(g, s)| GrandEntry {
                    grand: g,
                    files: files(s),
                })
                .collect(),
            provenance,
        }
    }
}

//! A masked minimum-distance-to-mean decoder (Barachant, Bonnet, Congedo,
//! Jutten 2012, "Multiclass brain–computer interface classification by
//! Riemannian geometry", IEEE Trans. Biomed. Eng. 59): one mean per class
//! from any averaging scheme, and each trial assigned to the class whose
//! mean is nearest in affine-invariant distance, compared on the trial's
//! observed block only (the mean's matching sub-block).
//!
//! Decoding accuracy on research data says nothing about clinical use.

use serde::{Deserialize, Serialize};

use super::MeanJob;
use crate::error::{LacunaError, Result};
use crate::select::folds;
use crate::spd::Mat;
use crate::trials::TrialSet;

/// Format version of model files.
pub const MODEL_VERSION: &str = "1";

/// A trained decoder, as written to and read from the model file.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Model {
    pub model_version: String,
    pub lacuna_version: String,
    pub caution: String,
    /// Channel names, in the order of the means' rows.
    pub channels: Vec<String>,
    /// The averaging scheme of the class means.
    pub scheme: String,
    pub classes: Vec<String>,
    /// One p×p mean per class; null where the scheme estimated nothing.
    pub means: Vec<Vec<Vec<Option<f64>>>>,
    /// The class means live in re-centred coordinates (every session
    /// whitened by its own mean before training): data to classify must be
    /// re-centred the same way first.
    #[serde(default)]
    pub recentred: bool,
    pub training: TrainingSummary,
}

/// What the model was trained on.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct TrainingSummary {
    /// Trials per class, in the order of `classes`.
    pub trials: Vec<usize>,
    /// Each class mean's solver converged.
    pub converged: Vec<bool>,
    pub cross_validation: Option<CrossValidation>,
}

/// Cross-validated scores of the decoder on its training trials.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct CrossValidation {
    /// `k-fold` or `leave-one-session-out`.
    pub scheme: String,
    /// Fold names (`fold 1`, … or the held-out session).
    pub folds: Vec<String>,
    pub accuracy: Vec<f64>,
    pub balanced_accuracy: Vec<f64>,
    /// Over all held-out trials: rows the true class, columns the predicted.
    pub confusion: Vec<Vec<usize>>,
    pub overall_accuracy: f64,
    pub overall_balanced_accuracy: f64,
    /// Accuracy of always answering the most frequent class.
    pub chance: f64,
}

/// One trial's prediction.
#[derive(Debug, Clone, Serialize)]
pub struct Prediction {
    pub class: String,
    /// Distance to each class mean, in the order of the model's classes.
    pub distances: Vec<f64>,
}

/// Settings of training (as JSON from Python: missing keys take these
/// defaults, which are the CLI's).
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct TrainJob {
    /// The mean job that gives each class mean.
    pub mean: MeanJob,
    /// Cross-validation: `Some(k)` for k folds, None for none.
    pub folds: Option<usize>,
    /// Leave one session out instead of k folds (needs sessions).
    pub by_session: bool,
    /// Re-centre every session at its own mean before training (needs
    /// sessions); the model records it and `Model::classify` does the same.
    pub recentre: bool,
    pub seed: u64,
}

impl Default for TrainJob {
    fn default() -> Self {
        TrainJob {
            mean: MeanJob::default(),
            folds: Some(5),
            by_session: false,
            recentre: false,
            seed: 0,
        }
    }
}

impl Model {
    fn mean_matrices(&self) -> Result<Vec<(Mat, Vec<usize>)>> {
        let p = self.channels.len();
        self.means
            .iter()
            .enumerate()
            .map(|(k, rows)| {
                if rows.len() != p || rows.iter().any(|r| r.len() != p) {
                    return Err(LacunaError::Unsupported(format!(
                        "the model's mean of class '{}' is not {p}×{p}",
                        self.classes.get(k).map_or("?", String::as_str)
                    )));
                }
                let m = Mat::from_fn(p, p, |a, b| rows[a][b].unwrap_or(f64::NAN));
                if m.iter().any(|v| v.is_infinite()) {
                    return Err(LacunaError::Unsupported(format!(
                        "the model's mean of class '{}' holds an infinite value",
                        self.classes[k]
                    )));
                }
                let est: Vec<usize> = (0..p).filter(|&c| m[(c, c)].is_finite()).collect();
                let sub = crate::spd::sub_block(&m, &est);
                if crate::spd::kernels::cholesky(&sub).is_none() {
                    return Err(LacunaError::Unsupported(format!(
                        "the model's mean of class '{}' is not positive definite",
                        self.classes[k]
                    )));
                }
                Ok((m, est))
            })
            .collect()
    }

    /// Checks the file's own consistency (version, sizes, means).
    pub fn check(&self) -> Result<()> {
        if self.model_version != MODEL_VERSION {
            return Err(LacunaError::Unsupported(format!(
                "model_version '{}' is not one this lacuna reads ({MODEL_VERSION})",
                self.model_version
            )));
        }
        if self.classes.len() < 2 || self.means.len() != self.classes.len() {
            return Err(LacunaError::Unsupported(format!(
                "the model has {} classes and {} means; it needs two or more classes, one mean each",
                self.classes.len(),
                self.means.len()
            )));
        }
        self.mean_matrices().map(|_| ())
    }

    /// Predicts every trial of `set` as the model asks: a model trained on
    /// re-centred sessions first re-centres `set` the same way (each session
    /// at its own mean, or all trials as one session when `set` has no
    /// sessions); then [`Model::predict`].
    pub fn classify(&self, set: &TrialSet) -> Result<Vec<Prediction>> {
        self.check()?;
        if !self.recentred {
            return self.predict(set);
        }
        let centred = super::RecentreJob {
            mean: MeanJob {
                scheme: self.scheme.clone(),
                drop_unobserved: true,
                ..MeanJob::default()
            },
        }
        .run(set)?
        .set;
        self.predict(&centred)
    }

    /// Predicts every trial of `set`, whose channels are matched to the
    /// model's by name: a channel the model does not know is refused. The
    /// trials are taken as they are (no re-centring: see [`Model::classify`]).
    pub fn predict(&self, set: &TrialSet) -> Result<Vec<Prediction>> {
        self.check()?;
        let at: Vec<usize> = set
            .channels()
            .iter()
            .map(|c| {
                self.channels.iter().position(|m| m == c).ok_or_else(|| {
                    LacunaError::Unsupported(format!(
                        "channel {c} of the data is not among the model's {} channels ({}); train on these channels or leave it out",
                        self.channels.len(),
                        self.channels.join(", ")
                    ))
                })
            })
            .collect::<Result<_>>()?;
        let means = self.mean_matrices()?;
        use rayon::prelude::*;
        use std::collections::BTreeMap;
        // Per observation pattern and class, once: the channels compared (in
        // the model's order), where they sit in the trial's block, and the
        // Cholesky factor of the mean's sub-block on them.
        let mut slots: BTreeMap<&[usize], usize> = BTreeMap::new();
        for t in set.trials() {
            let next = slots.len();
            slots.entry(t.observed.as_slice()).or_insert(next);
        }
        let mut patterns: Vec<&[usize]> = vec![&[]; slots.len()];
        for (o, &k) in &slots {
            patterns[k] = o;
        }
        type Compared = Option<(Vec<usize>, Option<Mat>)>;
        let prepared: Vec<Vec<Compared>> = patterns
            .par_iter()
            .map(|observed| {
                // (model channel, position in the trial's block), model order.
                let mut order: Vec<(usize, usize)> = observed
                    .iter()
                    .enumerate()
                    .map(|(r, &c)| (at[c], r))
                    .collect();
                order.sort_unstable();
                means
                    .iter()
                    .map(|(m, est)| {
                        let kept: Vec<(usize, usize)> = order
                            .iter()
                            .copied()
                            .filter(|(c, _)| est.contains(c))
                            .collect();
                        if kept.is_empty() {
                            return None;
                        }
                        let o: Vec<usize> = kept.iter().map(|&(c, _)| c).collect();
                        let pos: Vec<usize> = kept.iter().map(|&(_, r)| r).collect();
                        Some((
                            pos,
                            crate::spd::kernels::cholesky(&crate::spd::sub_block(m, &o)),
                        ))
                    })
                    .collect()
            })
            .collect();
        set.trials()
            .par_iter()
            .enumerate()
            .map(|(i, t)| {
                let compared = &prepared[slots[t.observed.as_slice()]];
                let distances: Vec<f64> = compared
                    .iter()
                    .map(|c| match c {
                        Some((pos, Some(l))) => crate::spd::distance::airm_distance_with_factor(
                            l,
                            &crate::spd::sub_block(&t.block, pos),
                        ),
                        Some((_, None)) => f64::NAN,
                        None => f64::INFINITY,
                    })
                    .collect();
                let best = (0..distances.len())
                    .filter(|&k| distances[k].is_finite())
                    .min_by(|&a, &b| distances[a].total_cmp(&distances[b]))
                    .ok_or_else(|| {
                        LacunaError::trial(
                            Some(i),
                            None,
                            "shares no channel with any class mean; it cannot be classified",
                        )
                    })?;
                Ok(Prediction {
                    class: self.classes[best].clone(),
                    distances,
                })
            })
            .collect()
    }
}

/// A mean as rows of the model file (null where not estimated).
fn rows_of(m: &Mat) -> Vec<Vec<Option<f64>>> {
    (0..m.nrows())
        .map(|a| {
            (0..m.ncols())
                .map(|b| Some(m[(a, b)]).filter(|v| v.is_finite()))
                .collect()
        })
        .collect()
}

/// The classes in sorted order and each trial's label; an error names the
/// first trial without one.
fn classes_of(set: &TrialSet) -> Result<(Vec<String>, &[String])> {
    let labels = set
        .labels
        .as_deref()
        .ok_or_else(|| LacunaError::MissingSetting {
            setting: "labels".into(),
            needed_for: "training a decoder".into(),
        })?;
    if let Some(i) = labels.iter().position(|l| l.trim().is_empty()) {
        return Err(LacunaError::trial(
            Some(i),
            None,
            "has no label (an empty cell): every training trial needs its class",
        ));
    }
    let mut classes: Vec<String> = labels.to_vec();
    classes.sort();
    classes.dedup();
    if classes.len() < 2 {
        return Err(LacunaError::Unsupported(format!(
            "training needs two or more classes; the labels hold only '{}'",
            classes.first().map_or("", String::as_str)
        )));
    }
    Ok((classes, labels))
}

impl TrainJob {
    /// Fits one mean per class on all trials, and cross-validates when asked.
    pub fn run(&self, set: &TrialSet) -> Result<Model> {
        self.mean.options(None)?;
        if self.folds == Some(1) || self.folds == Some(0) {
            return Err(LacunaError::OutOfRange {
                setting: "folds".into(),
                value: format!("{}", self.folds.unwrap_or(0)),
                allowed: "none (no cross-validation) or 2 and more".into(),
            });
        }
        if !self.recentre {
            return self.run_as_given(set);
        }
        if set.sessions.is_none() {
            return Err(LacunaError::MissingSetting {
                setting: "labels".into(),
                needed_for: "re-centring (a labels file with a `session` column)".into(),
            });
        }
        let centred = super::RecentreJob {
            mean: self.mean.clone(),
        }
        .run(set)?
        .set;
        let mut model = self.run_as_given(&centred)?;
        model.recentred = true;
        Ok(model)
    }

    fn run_as_given(&self, set: &TrialSet) -> Result<Model> {
        let (classes, labels) = classes_of(set)?;
        let (means, trials, converged) = self.fit(set, &classes, labels)?;
        let cross_validation = match (self.folds, self.by_session) {
            (_, true) => Some(self.cross_validate_sessions(set, &classes, labels)?),
            (Some(k), false) => Some(self.cross_validate(set, &classes, labels, k)?),
            (None, false) => None,
        };
        Ok(Model {
            model_version: MODEL_VERSION.into(),
            lacuna_version: env!("CARGO_PKG_VERSION").into(),
            caution: format!(
                "{} Decoding accuracy on research data says nothing about clinical use.",
                super::comparison::CAUTION
            ),
            channels: set.channels().to_vec(),
            scheme: self.mean.scheme.clone(),
            classes,
            means: means.iter().map(rows_of).collect(),
            recentred: false,
            training: TrainingSummary {
                trials,
                converged,
                cross_validation,
            },
        })
    }

    /// One mean per class on all trials of `set`: the means on the set's
    /// channels (NaN where a class left one out), trials and convergence
    /// per class.
    #[allow(clippy::type_complexity)]
    fn fit(
        &self,
        set: &TrialSet,
        classes: &[String],
        labels: &[String],
    ) -> Result<(Vec<Mat>, Vec<usize>, Vec<bool>)> {
        let mut means = Vec::new();
        let mut counts = Vec::new();
        let mut converged = Vec::new();
        for c in classes {
            let idx: Vec<usize> = (0..set.len()).filter(|&i| &labels[i] == c).collect();
            let run = self.mean.run(set.select_trials(&idx)?, None).map_err(|e| {
                LacunaError::InGroup {
                    group: c.clone(),
                    source: Box::new(e),
                }
            })?;
            means.push(super::grouped::embed(&run, set.channels()));
            counts.push(idx.len());
            converged.push(run.converged());
        }
        Ok((means, counts, converged))
    }

    /// Scores the decoder trained on `train` on the trials `test`.
    fn fold(
        &self,
        set: &TrialSet,
        classes: &[String],
        labels: &[String],
        train: &[usize],
        test: &[usize],
    ) -> Result<Vec<(usize, usize)>> {
        let tr = set.select_trials(train)?;
        let tr_labels: Vec<String> = train.iter().map(|&i| labels[i].clone()).collect();
        for c in classes {
            if !tr_labels.contains(c) {
                return Err(LacunaError::Unsupported(format!(
                    "a cross-validation fold has no training trial of class '{c}'; use fewer folds"
                )));
            }
        }
        let (means, _, _) = self.fit(&tr, classes, &tr_labels)?;
        let model = Model {
            model_version: MODEL_VERSION.into(),
            lacuna_version: String::new(),
            caution: String::new(),
            channels: set.channels().to_vec(),
            scheme: self.mean.scheme.clone(),
            classes: classes.to_vec(),
            means: means.iter().map(rows_of).collect(),
            recentred: false,
            training: TrainingSummary {
                trials: Vec::new(),
                converged: Vec::new(),
                cross_validation: None,
            },
        };
        let te = set.select_trials(test)?;
        let predictions = model.predict(&te)?;
        Ok(test
            .iter()
            .zip(&predictions)
            .map(|(&i, pr)| {
                let truth = classes
                    .iter()
                    .position(|c| c == &labels[i])
                    .expect("a class");
                let said = classes
                    .iter()
                    .position(|c| c == &pr.class)
                    .expect("a class");
                (truth, said)
            })
            .collect())
    }

    fn cross_validate(
        &self,
        set: &TrialSet,
        classes: &[String],
        labels: &[String],
        k: usize,
    ) -> Result<CrossValidation> {
        crate::error::int_in("folds", k, (2, set.len().max(2)))?;
        let fs = folds(set.len(), k, self.seed ^ 0xDEC0);
        let mut outcomes = Vec::new();
        for test in &fs {
            let train: Vec<usize> = (0..set.len())
                .filter(|i| test.binary_search(i).is_err())
                .collect();
            outcomes.push(self.fold(set, classes, labels, &train, test)?);
        }
        let names = (1..=fs.len()).map(|f| format!("fold {f}")).collect();
        Ok(summarise("k-fold", names, outcomes, classes, labels))
    }

    fn cross_validate_sessions(
        &self,
        set: &TrialSet,
        classes: &[String],
        labels: &[String],
    ) -> Result<CrossValidation> {
        let sessions = set
            .sessions
            .as_deref()
            .ok_or_else(|| LacunaError::MissingSetting {
                setting: "labels".into(),
                needed_for: "leave-one-session-out (a labels file with a `session` column)".into(),
            })?;
        let mut names: Vec<String> = Vec::new();
        for s in sessions {
            if !names.contains(s) {
                names.push(s.clone());
            }
        }
        if names.len() < 2 {
            return Err(LacunaError::Unsupported(
                "leave-one-session-out needs two or more sessions".into(),
            ));
        }
        let mut outcomes = Vec::new();
        for s in &names {
            let test: Vec<usize> = (0..set.len()).filter(|&i| &sessions[i] == s).collect();
            let train: Vec<usize> = (0..set.len()).filter(|&i| &sessions[i] != s).collect();
            outcomes.push(self.fold(set, classes, labels, &train, &test)?);
        }
        Ok(summarise(
            "leave-one-session-out",
            names,
            outcomes,
            classes,
            labels,
        ))
    }
}

/// Accuracy, balanced accuracy (mean recall over the classes present) and
/// the confusion matrix from (true, predicted) class indices per fold.
fn summarise(
    scheme: &str,
    folds: Vec<String>,
    outcomes: Vec<Vec<(usize, usize)>>,
    classes: &[String],
    labels: &[String],
) -> CrossValidation {
    let k = classes.len();
    let mut confusion = vec![vec![0usize; k]; k];
    let balanced = |pairs: &[(usize, usize)]| {
        let recalls: Vec<f64> = (0..k)
            .filter_map(|c| {
                let of_c: Vec<&(usize, usize)> = pairs.iter().filter(|p| p.0 == c).collect();
                (!of_c.is_empty())
                    .then(|| of_c.iter().filter(|p| p.1 == c).count() as f64 / of_c.len() as f64)
            })
            .collect();
        recalls.iter().sum::<f64>() / recalls.len().max(1) as f64
    };
    let accuracy = |pairs: &[(usize, usize)]| {
        pairs.iter().filter(|p| p.0 == p.1).count() as f64 / pairs.len().max(1) as f64
    };
    for &(t, s) in outcomes.iter().flatten() {
        confusion[t][s] += 1;
    }
    let all: Vec<(usize, usize)> = outcomes.iter().flatten().copied().collect();
    let most = classes
        .iter()
        .map(|c| labels.iter().filter(|l| *l == c).count())
        .max()
        .unwrap_or(0);
    CrossValidation {
        scheme: scheme.into(),
        folds,
        accuracy: outcomes.iter().map(|o| accuracy(o)).collect(),
        balanced_accuracy: outcomes.iter().map(|o| balanced(o)).collect(),
        confusion,
        overall_accuracy: accuracy(&all),
        overall_balanced_accuracy: balanced(&all),
        chance: most as f64 / labels.len().max(1) as f64,
    }
}

//! The recommendation: the protocols' spreads turned into a choice with
//! reasons in plain words, or an honest "no clear winner".

use serde::{Deserialize, Serialize};

use super::*;

/// The recommendation and its reasons, in plain words.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Recommendation {
    /// The recommended candidate (the best on the primary protocol), if any ran.
    pub scheme: Option<String>,
    /// What the recommendation aims at.
    pub target: Target,
    /// The protocol that ranked: "simulated-dropout" or "held-out-fit".
    pub primary: String,
    /// False when other candidates' interquartile ranges overlap its own.
    pub clear: bool,
    /// Candidates statistically tied with it (IQR overlap), itself first.
    pub tied: Vec<String>,
    pub reasons: Vec<String>,
}

fn ranked(scores: &[Score], lower_is_better: bool) -> Vec<&Score> {
    let mut v: Vec<&Score> = scores
        .iter()
        .filter(|s| s.spread.is_some() && s.partial.is_none() && s.failures == 0)
        .collect();
    v.sort_by(|a, b| {
        let (x, y) = (median_of(a), median_of(b));
        if lower_is_better {
            x.total_cmp(&y)
        } else {
            y.total_cmp(&x)
        }
    });
    v
}

/// The median of a ranked score (ranked scores always have a spread).
fn median_of(s: &Score) -> f64 {
    s.spread.map_or(f64::NAN, |x| x.median)
}

/// Candidates whose interquartile range reaches the best one's (ties).
fn ties(order: &[&Score]) -> Vec<String> {
    // Protocol runs stop at a relative gradient norm of 1e-5, so scores
    // closer than TIE are solver precision, not evidence.
    const TIE: f64 = 1e-4;
    let Some(b) = order.first().and_then(|s| s.spread) else {
        return Vec::new();
    };
    order
        .iter()
        .filter(|s| s.spread.is_some_and(|x| x.q1 <= b.q3 + TIE))
        .map(|s| s.candidate.clone())
        .collect()
}

/// For schemes tied on the primary protocol: what each other protocol says
/// about them — ties them too, narrows them, or separates one.
fn tie_evidence(
    tied: &[String],
    primary: &str,
    fit: Option<&HeldOutFit>,
    dec: Option<&Decoding>,
) -> Vec<String> {
    let mut out = Vec::new();
    let mut others: Vec<(&str, &[Score], bool)> = Vec::new();
    if primary != "held-out-fit"
        && let Some(f) = fit
    {
        others.push(("Held-out fit", &f.scores, true));
    }
    if let Some(d) = dec {
        others.push(("Decoding", &d.scores, false));
    }
    for (name, scores, lower_is_better) in others {
        let among: Vec<&Score> = ranked(scores, lower_is_better)
            .into_iter()
            .filter(|s| tied.contains(&s.candidate))
            .collect();
        if among.len() < 2 {
            continue;
        }
        let still = if lower_is_better {
            ties(&among)
        } else {
            // Higher is better: mirror the interval test.
            let b = among[0].spread.unwrap_or(Spread::EMPTY);
            among
                .iter()
                .filter(|s| s.spread.is_some_and(|x| x.q3 >= b.q1 - 1e-4))
                .map(|s| s.candidate.clone())
                .collect()
        };
        out.push(if still.len() == among.len() {
            format!(
                "{name} ties them too (interquartile ranges overlap): the evidence does not separate {}.",
                still.join(", ")
            )
        } else if still.len() == 1 {
            format!(
                "{name} separates them: {} is best among the tied schemes (median {:.4}) and its interquartile range is clear of the others'.",
                still[0],
                median_of(among[0])
            )
        } else {
            format!(
                "{name} narrows the tie to {} (the others' ranges are clear of the best).",
                still.join(", ")
            )
        });
    }
    out
}

fn failures_and_partials(scores: &[Score], channels: usize, reasons: &mut Vec<String>) {
    let partial: Vec<String> = scores
        .iter()
        .filter(|s| s.partial.is_some())
        .map(|s| {
            format!(
                "{} ({} of {channels} channels)",
                s.candidate,
                s.partial.unwrap_or(0)
            )
        })
        .collect();
    if !partial.is_empty() {
        reasons.push(format!(
            "Not ranked because they estimate only some channels: {}.",
            partial.join(", ")
        ));
    }
    let needs_rank = |s: &&Score| {
        s.failure_reason
            .as_deref()
            .is_some_and(|r| r.contains("needs full-rank"))
    };
    let full_rank_only: Vec<&str> = scores
        .iter()
        .filter(|s| s.failures > 0)
        .filter(needs_rank)
        .map(|s| s.candidate.as_str())
        .collect();
    if !full_rank_only.is_empty() {
        reasons.push(format!(
            "Not run because they need full-rank trials: {} (the airm-observed+… candidates are the masked mean after a regulariser).",
            full_rank_only.join(", ")
        ));
    }
    let failed: Vec<String> = scores
        .iter()
        .filter(|s| s.failures > 0 && !needs_rank(s))
        .map(|s| {
            format!(
                "{} ({})",
                s.candidate,
                s.failure_reason.clone().unwrap_or_default()
            )
        })
        .collect();
    if !failed.is_empty() {
        reasons.push(format!("Could not run: {}.", failed.join("; ")));
    }
}

/// Combines the protocols into a recommendation for `target`. The primary
/// protocol is simulated dropout when it ran, otherwise the held-out fit
/// (rank-deficient data, where no complete-data reference exists).
pub fn recommend(
    dropout: Option<&DropoutValidation>,
    fit: Option<&HeldOutFit>,
    dec: Option<&Decoding>,
    target: Target,
    channels: usize,
) -> Recommendation {
    let mut reasons = Vec::new();
    let (primary, order, all) = match (dropout, fit) {
        (Some(d), _) if !ranked(&d.scores, true).is_empty() => {
            ("simulated-dropout", ranked(&d.scores, true), &d.scores)
        }
        (_, Some(f)) if !ranked(&f.scores, true).is_empty() => {
            ("held-out-fit", ranked(&f.scores, true), &f.scores)
        }
        _ => {
            return Recommendation {
                scheme: None,
                target,
                primary: "none".into(),
                clear: false,
                tied: vec![],
                reasons: vec!["no candidate completed every repeat or fold of a protocol".into()],
            };
        }
    };
    let best = order[0];
    let b = best.spread.unwrap_or(Spread::EMPTY);
    let tied = ties(&order);
    let clear = tied.len() == 1;
    reasons.push(match target {
        Target::Centre => "Target: the Riemannian centre of the trials (minimum-distance decoding, re-centring; a common scale factor does not matter). Use --target population for spatial filters, whitening or power compared across studies.".to_string(),
        Target::Population => "Target: the population covariance (spatial filters, whitening, source models, power compared across window lengths). References are unbiased for it: the arithmetic mean of complete trials, and the Gaussian likelihood of held-out trials.".to_string(),
    });
    match (primary, dropout) {
        ("simulated-dropout", Some(d)) => reasons.push(format!(
            "Simulated dropout ({} repeats, {} of {} complete trials each, on {} channels): {} came closest to the complete-data {} (median affine-invariant distance {:.4}, interquartile range {:.4}–{:.4}).",
            d.repeats,
            d.trials_per_repeat,
            d.complete_trials,
            d.channels.len(),
            best.candidate,
            match d.target {
                Target::Centre => "Karcher mean",
                Target::Population => "arithmetic mean (pooled sample covariance)",
            },
            b.median,
            b.q1,
            b.q3
        )),
        _ => {
            let f = fit.map_or(0, |f| f.folds);
            reasons.push(format!(
                "Held-out fit ({f}-fold; {}): {} fitted the held-out trials best (median {:.4}, interquartile range {:.4}–{:.4}).",
                fit.map_or("", |f| f.criterion.describe()),
                best.candidate,
                b.median,
                b.q1,
                b.q3
            ));
            if best.candidate == "gaussian-em"
                && fit.is_some_and(|f| f.criterion == FitCriterion::Likelihood)
            {
                reasons.push("The likelihood criterion is the one gaussian-em maximises on the training trials, so it favours that scheme slightly; a regularised masked mean within its interquartile range is as good a fit.".into());
            }
            if dropout.is_none() {
                reasons.push("Simulated dropout and decoding need full-rank trials (their references and distances are undefined for singular blocks), so the held-out likelihood ranks alone. A regulariser adds bias (each block is pulled towards a multiple of the identity) and removes variance and the singularity; the held-out likelihood weighs the two on trials the mean never saw.".into());
            }
        }
    }
    if let Some(second) = order.get(1) {
        let s = second.spread.unwrap_or(Spread::EMPTY);
        reasons.push(if clear {
            format!(
                "The runner-up, {}, had median {:.4} ({:.4}–{:.4}); the ranges do not overlap.",
                second.candidate, s.median, s.q1, s.q3
            )
        } else {
            format!(
                "No clear winner: the interquartile ranges of {} overlap (runner-up {} at median {:.4}, {:.4}–{:.4}).",
                tied.join(", "),
                second.candidate,
                s.median,
                s.q1,
                s.q3
            )
        });
    }
    if !clear {
        reasons.extend(tie_evidence(&tied, primary, fit, dec));
    }
    if let Some(d) = dropout
        && !d.left_out.is_empty()
    {
        reasons.push(format!(
            "Left out of the simulated dropout for lack of trials observing them together with the rest: {}. That ranking says nothing about them.",
            d.left_out.join(", ")
        ));
    }
    failures_and_partials(all, channels, &mut reasons);
    if primary == "simulated-dropout" && target == Target::Centre {
        reasons.push("The reference is a Riemannian (Karcher) mean, which favours schemes that average in the same geometry; the held-out fit and decoding checks below do not share that bias.".into());
    }
    if let Some(fit) = fit
        && primary == "simulated-dropout"
    {
        let o = ranked(&fit.scores, true);
        if let Some(f) = o.first() {
            let pos = o.iter().position(|s| s.candidate == best.candidate);
            reasons.push(format!(
                "Held-out fit ({}-fold, {}): best {} ({:.4}); {} ranks {}.",
                fit.folds,
                fit.criterion.describe(),
                f.candidate,
                median_of(f),
                best.candidate,
                pos.map_or("—".into(), |p| format!("{} of {}", p + 1, o.len()))
            ));
        }
    }
    let criterion_matches_target = fit.is_some_and(|f| {
        matches!(
            (target, f.criterion),
            (Target::Centre, FitCriterion::AffineDistance)
                | (Target::Population, FitCriterion::Likelihood)
        )
    });
    if let Some(fit) = fit.filter(|_| criterion_matches_target && dropout.is_some()) {
        // Would the other target's held-out criterion pick another scheme?
        let mine = ranked(&fit.scores, true);
        let other = ranked(&fit.other_scores, true);
        if let (Some(a), Some(o)) = (mine.first(), other.first())
            && a.candidate != o.candidate
        {
            let other_target = match target {
                Target::Centre => "population",
                Target::Population => "centre",
            };
            reasons.push(format!(
                "The two targets rank differently: on the same held-out folds, the {} ({}) puts {} first, where this target's criterion puts {} first. If you need the {other_target}, run with --target {other_target}.",
                fit.other_criterion.describe(),
                other_target,
                o.candidate,
                a.candidate
            ));
        }
    }
    if let Some(dec) = dec {
        let o = ranked(&dec.scores, false);
        if let Some(top) = o.first() {
            let t = top.spread.unwrap_or(Spread::EMPTY);
            let mine = dec
                .scores
                .iter()
                .find(|s| s.candidate == best.candidate)
                .and_then(|s| s.spread);
            reasons.push(format!(
                "Decoding (minimum distance to mean, {}-fold, chance {:.2}): best {} with median fold accuracy {:.2}{}.",
                dec.folds,
                dec.chance,
                top.candidate,
                t.median,
                mine.map_or(String::new(), |m| format!("; {} {:.2}", best.candidate, m.median))
            ));
            if let Some(m) = mine
                && top.candidate != best.candidate
                && t.q1 > m.q3
            {
                reasons.push(format!(
                    "Decoding clearly favours {}: if classification is the goal, prefer it.",
                    top.candidate
                ));
            }
        }
    }
    Recommendation {
        scheme: Some(best.candidate.clone()),
        target,
        primary: primary.into(),
        clear,
        tied,
        reasons,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn score(name: &str, median: f64, q1: f64, q3: f64) -> Score {
        Score {
            candidate: name.into(),
            spread: Some(Spread {
                median,
                q1,
                q3,
                n: 5,
            }),
            partial: None,
            failures: 0,
            failure_reason: None,
        }
    }

    fn dropout(scores: Vec<Score>) -> DropoutValidation {
        DropoutValidation {
            channels: vec!["a".into(), "b".into()],
            left_out: vec![],
            complete_trials: 40,
            trials_per_repeat: 40,
            repeats: 5,
            target: Target::Centre,
            scores,
        }
    }

    fn decoding(scores: Vec<Score>) -> Decoding {
        Decoding {
            folds: 5,
            classes: vec!["x".into(), "y".into()],
            chance: 0.5,
            scores,
        }
    }

    // Overlapping interquartile ranges are a tie (common practice, no source);
    // the reasons must say what the other protocols make of the tied schemes.
    #[test]
    fn a_tie_names_the_evidence_that_separates_or_ties() {
        let d = dropout(vec![
            score("p", 0.10, 0.08, 0.12),
            score("q", 0.11, 0.09, 0.13),
            score("r", 0.50, 0.45, 0.55),
        ]);
        // Decoding separates p and q (q clearly higher accuracy).
        let sep = decoding(vec![
            score("p", 0.70, 0.65, 0.72),
            score("q", 0.90, 0.85, 0.95),
            score("r", 0.95, 0.90, 1.0),
        ]);
        let r = recommend(Some(&d), None, Some(&sep), Target::Centre, 2);
        assert!(!r.clear);
        assert_eq!(r.tied, vec!["p".to_string(), "q".to_string()]);
        assert!(
            r.reasons
                .iter()
                .any(|s| s.starts_with("Decoding separates them: q is best")),
            "{:?}",
            r.reasons
        );
        // Decoding ties them as well.
        let tie = decoding(vec![
            score("p", 0.80, 0.75, 0.85),
            score("q", 0.82, 0.78, 0.86),
        ]);
        let r = recommend(Some(&d), None, Some(&tie), Target::Centre, 2);
        assert!(
            r.reasons
                .iter()
                .any(|s| s.starts_with("Decoding ties them too") && s.contains("separate q, p.")),
            "{:?}",
            r.reasons
        );
        // A clear winner gets no tie sentence.
        let clear = dropout(vec![
            score("p", 0.10, 0.08, 0.12),
            score("q", 0.30, 0.25, 0.35),
        ]);
        let r = recommend(Some(&clear), None, Some(&tie), Target::Centre, 2);
        assert!(r.clear);
        assert!(
            !r.reasons
                .iter()
                .any(|s| s.contains("ties them") || s.contains("separates them"))
        );
    }
}

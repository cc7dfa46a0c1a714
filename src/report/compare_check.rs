//! Is a compare.json whole and self-consistent before the HTML page is drawn
//! from it? The page indexes matrices by channel, so every size must agree
//! with the channel list; a document that fails is refused with the field
//! named, instead of a page drawn from inconsistent data (or a crash).

use serde_json::Value;

fn square_of(v: &Value, p: usize, what: &str, nonneg_int: bool) -> Result<(), String> {
    let rows = v
        .as_array()
        .ok_or_else(|| format!("{what} is not a list of rows"))?;
    if rows.len() != p {
        return Err(format!("{what} has {} rows for {p} channels", rows.len()));
    }
    for (i, r) in rows.iter().enumerate() {
        let r = r
            .as_array()
            .ok_or_else(|| format!("{what} row {i} is not a list"))?;
        if r.len() != p {
            return Err(format!(
                "{what} row {i} has {} entries for {p} channels",
                r.len()
            ));
        }
        for (j, x) in r.iter().enumerate() {
            let ok = if nonneg_int {
                x.as_u64().is_some()
            } else {
                x.is_null() || x.as_f64().is_some()
            };
            if !ok {
                return Err(format!("{what}[{i}][{j}] is not a valid entry ({x})"));
            }
        }
    }
    Ok(())
}

/// Checks the fields the page reads. Returns what is wrong, in words.
pub fn check_compare(doc: &Value) -> Result<(), String> {
    if !doc.is_object() {
        return Err("the document is not a JSON object".into());
    }
    let names = doc["channels"]
        .as_array()
        .ok_or("channels is missing or not a list")?;
    let mut seen = std::collections::BTreeSet::new();
    for n in names {
        let n = n.as_str().ok_or("a channel name is not a string")?;
        if n.is_empty() || !seen.insert(n) {
            return Err(format!("channel name '{n}' is empty or repeated"));
        }
    }
    let p = names.len();
    if p == 0 {
        return Err("channels is empty".into());
    }
    doc["trials"]
        .as_u64()
        .filter(|&t| t > 0)
        .ok_or("trials is missing or not a positive integer")?;
    square_of(&doc["coobservation"], p, "coobservation", true)?;
    for pair in doc["unconstrained_pairs"].as_array().into_iter().flatten() {
        let ab: Option<Vec<u64>> = pair
            .as_array()
            .and_then(|a| a.iter().map(Value::as_u64).collect());
        match ab.as_deref() {
            Some(&[a, b]) if a < b && (b as usize) < p => {}
            _ => {
                return Err(format!(
                    "unconstrained pair {pair} is not [a, b] with a < b < {p}"
                ));
            }
        }
    }
    let schemes = doc["schemes"]
        .as_array()
        .ok_or("schemes is missing or not a list")?;
    for s in schemes {
        let name = s["scheme"].as_str().ok_or("a scheme has no name")?;
        if s["status"] == "ok" {
            square_of(&s["mean"], p, &format!("the mean of {name}"), false)?;
        }
    }
    if let Some(labels) = doc["distances"]["schemes"].as_array() {
        let k = labels.len();
        let m = doc["distances"]["matrix"]
            .as_array()
            .ok_or("distances.matrix is missing")?;
        if m.len() != k || m.iter().any(|r| r.as_array().is_none_or(|r| r.len() != k)) {
            return Err(format!("distances.matrix is not {k} × {k}"));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    // Common practice, no source: each inconsistency is caught.
    #[test]
    fn inconsistent_documents_are_refused() {
        let good = json!({"channels": ["a", "b"], "trials": 3,
            "coobservation": [[3, 1], [1, 2]], "unconstrained_pairs": [],
            "schemes": [{"scheme": "x", "status": "ok", "mean": [[1.0, null], [null, 2.0]]}],
            "distances": {"schemes": ["x"], "matrix": [[0.0]]}});
        assert!(check_compare(&good).is_ok());
        for (key, bad) in [
            ("channels", json!(["a"])),
            ("channels", json!(["a", "a"])),
            ("trials", json!(-1)),
            ("unconstrained_pairs", json!([[0, 999]])),
            ("unconstrained_pairs", json!([[-1, 0]])),
            ("coobservation", json!([[1, 2]])),
        ] {
            let mut d = good.clone();
            d[key] = bad;
            assert!(check_compare(&d).is_err(), "{key}");
        }
        assert!(check_compare(&json!({})).is_err());
    }
}

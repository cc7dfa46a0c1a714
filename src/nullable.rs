//! JSON has no NaN or infinity: serde_json writes such numbers as `null`.
//! Result types that may hold them read `null` back as NaN with
//! `#[serde(deserialize_with = "crate::nullable::f64")]`, so every typed
//! result survives a round trip through its own JSON.

use serde::{Deserialize, Deserializer};

/// A number, or NaN for `null`.
pub fn f64<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
}

/// A list of numbers, NaN for each `null`.
pub fn vec_f64<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
    Ok(Vec::<Option<f64>>::deserialize(d)?
        .into_iter()
        .map(|x| x.unwrap_or(f64::NAN))
        .collect())
}

#[cfg(test)]
mod tests {
    #[derive(serde::Serialize, serde::Deserialize)]
    struct T {
        #[serde(deserialize_with = "super::f64")]
        x: f64,
    }

    // Common practice, no source: NaN → null → NaN; finite values unchanged.
    #[test]
    fn nan_round_trips_through_null() {
        let s = serde_json::to_string(&T { x: f64::NAN }).unwrap();
        assert_eq!(s, r#"{"x":null}"#);
        assert!(serde_json::from_str::<T>(&s).unwrap().x.is_nan());
        let s = serde_json::to_string(&T { x: 2.5 }).unwrap();
        assert_eq!(serde_json::from_str::<T>(&s).unwrap().x, 2.5);
    }
}

//! EDF/EDF+ (16-bit) and BDF/BDF+ (24-bit) reading and writing.
//!
//! Our own reader of the European Data Format (Kemp et al. 1992; EDF+ by
//! Kemp & Olivan 2003; BDF is the 24-bit variant with a 0xFF first byte).
//! The header is parsed and checked against the file length before any
//! data-sized allocation, so a hostile header cannot make us allocate more
//! than the file holds. Data are read record by record for a requested
//! sample range, so memory stays proportional to the range, not the file.
//! A writer exists for the demo scenario and the tests.

mod annotations;
mod header;
mod reader;
mod writer;

pub use annotations::*;
pub use header::*;
pub use reader::*;
pub use writer::*;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ingest::{Event, SignalSource};

    // Round trip through our writer: digital resolution bounds the error
    // (common practice, no source).
    #[test]
    fn round_trip_edf_and_bdf() {
        let names: Vec<String> = (0..3).map(|c| format!("E{c}")).collect();
        let signals: Vec<Vec<f64>> = (0..3)
            .map(|c| {
                (0..600)
                    .map(|i| 50.0 * ((i as f64) * 0.05 * (c + 1) as f64).sin())
                    .collect()
            })
            .collect();
        let events = [Event {
            onset: 1.5,
            duration: 0.5,
            label: "cue".into(),
        }];
        for variant in [EdfVariant::EdfPlus, EdfVariant::Bdf] {
            let spec = EdfWriteSpec {
                variant,
                channel_names: &names,
                unit: "uV",
                physical_range: (-200.0, 200.0),
                sampling_rate: 100,
                record_seconds: 1,
                patient: "X",
                recording: "test",
                events: &events,
            };
            let dir =
                std::env::temp_dir().join(format!("lacuna-edf-{variant:?}-{}", std::process::id()));
            std::fs::create_dir_all(&dir).unwrap();
            let path = dir.join("x.edf");
            write_edf(&path, &spec, &signals).unwrap();
            let mut f = EdfFile::open(&path).unwrap();
            assert_eq!(f.header.variant, variant);
            assert_eq!(f.channel_names(), &names[..]);
            assert_eq!(f.n_samples(), 600);
            let mut out = vec![Vec::new(); 3];
            f.read(130, 470, &mut out).unwrap();
            let res = 400.0 / (variant.digital_range().1 - variant.digital_range().0) as f64;
            for c in 0..3 {
                for (j, v) in out[c].iter().enumerate() {
                    assert!((v - signals[c][130 + j]).abs() <= res * 0.51 + 1e-12);
                }
            }
            let ev = f.annotations().unwrap();
            if variant == EdfVariant::EdfPlus {
                assert_eq!(ev, events.to_vec());
            } else {
                assert!(ev.is_empty());
            }
            std::fs::remove_dir_all(&dir).ok();
        }
    }
}

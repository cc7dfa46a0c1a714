//! A mutation fuzzer for every reader, on stable Rust.
//!
//! Each target starts from the committed seed corpus (tests/fuzz/corpus/),
//! mutates inputs with our seeded generator (bit flips, byte and integer
//! overwrites, digit strings in header fields, truncation, insertion,
//! splicing) and feeds them to the reader through a file, as users do.
//! A case fails on a panic, on taking longer than 2 s (a hang), or on any
//! single allocation above 64 MiB (inputs are at most a few hundred KiB, so
//! that could only come from trusting a hostile header). A failing input is
//! saved to the temp folder and its path printed.
//!
//! `cargo test` runs each target for a couple of seconds. For a long run:
//!     LACUNA_FUZZ_SECONDS=600 cargo test --release --test fuzz -- --nocapture --test-threads 1
//! and LACUNA_FUZZ_SEED=N to vary the mutation stream.

use std::alloc::{GlobalAlloc, Layout, System};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::{Duration, Instant};

use lacuna::ingest::SignalSource;
use lacuna::simulate::rng::Rng;

/// Refuses (panics on) single allocations above the limit while armed.
struct CappedAlloc;
static ARMED: AtomicBool = AtomicBool::new(false);
static LARGEST: AtomicUsize = AtomicUsize::new(0);
const LIMIT: usize = 64 << 20;

unsafe impl GlobalAlloc for CappedAlloc {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        if ARMED.load(Ordering::Relaxed) {
            LARGEST.fetch_max(layout.size(), Ordering::Relaxed);
            if layout.size() > LIMIT {
                return std::ptr::null_mut();
            }
        }
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        if ARMED.load(Ordering::Relaxed) {
            LARGEST.fetch_max(new_size, Ordering::Relaxed);
            if new_size > LIMIT {
                return std::ptr::null_mut();
            }
        }
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: CappedAlloc = CappedAlloc;

fn corpus(kind: &str) -> Vec<(String, Vec<u8>)> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fuzz/corpus")
        .join(kind);
    let mut files: Vec<_> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .map(|e| e.unwrap().path())
        .collect();
    files.sort();
    files
        .into_iter()
        .map(|p| {
            (
                p.file_name().unwrap().to_string_lossy().into_owned(),
                std::fs::read(&p).unwrap(),
            )
        })
        .collect()
}

const INTERESTING: [&str; 12] = [
    "-1", "0", "1", "99999999", "-9999999", "4294967", "1e308", "nan", "inf", "  ", "+0.5", "65536",
];

fn mutate(input: &[u8], others: &[(String, Vec<u8>)], rng: &mut Rng) -> Vec<u8> {
    let mut v = input.to_vec();
    for _ in 0..1 + rng.below(4) {
        if v.is_empty() {
            v.push(rng.next_u64() as u8);
            continue;
        }
        let at = rng.below(v.len());
        match rng.below(9) {
            0 => v[at] ^= 1 << rng.below(8),
            1 => v[at] = rng.next_u64() as u8,
            2 => {
                // An ASCII number over a header-like field.
                let s = INTERESTING[rng.below(INTERESTING.len())].as_bytes();
                for (k, b) in s.iter().enumerate() {
                    if at + k < v.len() {
                        v[at + k] = *b;
                    }
                }
            }
            3 => v.truncate(at),
            4 => {
                let n = 1 + rng.below(64);
                let bytes: Vec<u8> = (0..n).map(|_| rng.next_u64() as u8).collect();
                v.splice(at..at, bytes);
            }
            5 => {
                let end = (at + 1 + rng.below(256)).min(v.len());
                v.drain(at..end);
            }
            6 => {
                // Little-endian integer extremes (binary fields and samples).
                let word: [u8; 4] = match rng.below(4) {
                    0 => [0xFF; 4],
                    1 => [0x00, 0x00, 0x80, 0xFF],
                    2 => [0xFF, 0xFF, 0x7F, 0x00],
                    _ => [0; 4],
                };
                for (k, b) in word.iter().enumerate() {
                    if at + k < v.len() {
                        v[at + k] = *b;
                    }
                }
            }
            7 => {
                let (_, other) = &others[rng.below(others.len())];
                if !other.is_empty() {
                    let from = rng.below(other.len());
                    let n = (1 + rng.below(512)).min(other.len() - from);
                    let len = n.min(v.len() - at);
                    v[at..at + len].copy_from_slice(&other[from..from + len]);
                }
            }
            _ => {
                let c = [b',', b'\n', b'"', b'-', b'.', b'e', 0x14, 0x15, 0][rng.below(9)];
                v.insert(at, c);
            }
        }
    }
    v
}

type Target = fn(&Path) -> bool;

fn fuzz(name: &str, kind: &str, ext: &str, target: Target) {
    let seconds: f64 = std::env::var("LACUNA_FUZZ_SECONDS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(2.0);
    let seed: u64 = std::env::var("LACUNA_FUZZ_SEED")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(1);
    let seeds = corpus(kind);
    let dir = std::env::temp_dir().join(format!("lacuna-fuzz-{name}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let file: PathBuf = dir.join(format!("case.{ext}"));
    let mut rng = Rng::new(
        seed ^ name
            .bytes()
            .fold(0u64, |h, b| h.wrapping_mul(31).wrapping_add(b as u64)),
    );
    let start = Instant::now();
    let (mut cases, mut accepted) = (0u64, 0u64);
    let mut slowest = Duration::ZERO;
    // Seeds first (they must all be accepted), then mutations.
    for (seed_name, bytes) in &seeds {
        std::fs::write(&file, bytes).unwrap();
        assert!(target(&file), "{name}: seed {seed_name} should be accepted");
    }
    while start.elapsed().as_secs_f64() < seconds {
        let (_, base) = &seeds[rng.below(seeds.len())];
        let input = mutate(base, &seeds, &mut rng);
        std::fs::write(&file, &input).unwrap();
        let t0 = Instant::now();
        ARMED.store(true, Ordering::Relaxed);
        let outcome = std::panic::catch_unwind(|| target(&file));
        ARMED.store(false, Ordering::Relaxed);
        let took = t0.elapsed();
        slowest = slowest.max(took);
        cases += 1;
        let keep = |why: &str| -> ! {
            let saved =
                std::env::temp_dir().join(format!("lacuna-fuzz-failure-{name}-{cases}.{ext}"));
            std::fs::write(&saved, &input).unwrap();
            panic!(
                "{name}: {why} on case {cases}; input saved to {}",
                saved.display()
            );
        };
        match outcome {
            Ok(ok) => accepted += ok as u64,
            Err(_) => keep("panic"),
        }
        if took > Duration::from_secs(2) {
            keep("hang (over 2 s)");
        }
    }
    std::fs::remove_dir_all(&dir).ok();
    eprintln!(
        "{name}: {cases} cases in {:.0} s, {accepted} accepted, slowest {:.1} ms, largest allocation {} KiB, no panic, hang or large allocation",
        start.elapsed().as_secs_f64(),
        slowest.as_secs_f64() * 1e3,
        LARGEST.load(Ordering::Relaxed) >> 10
    );
}

fn edf_target(path: &Path) -> bool {
    let Ok(mut f) = lacuna::ingest::edf::EdfFile::open(path) else {
        return false;
    };
    let n = f.n_samples();
    let mut out = vec![Vec::new(); f.channel_names().len()];
    let step = 4096.min(n.max(1));
    let mut s = 0;
    while s < n {
        if f.read(s, (s + step).min(n), &mut out).is_err() {
            return false;
        }
        s += step;
    }
    let _ = f.rails();
    f.annotations().is_ok()
}

fn npy_target(path: &Path) -> bool {
    let a = lacuna::trials::io::read_stack(path).is_ok();
    let b = lacuna::ingest::epochs::read_npy_epochs(path, 100.0, None).is_ok();
    let c = lacuna::trials::io::load_trial_set(path, None, None).is_ok();
    let d = lacuna::trials::io::read_mask(path, 3, 4).is_ok();
    a || b || c || d
}

fn signal_csv_target(path: &Path) -> bool {
    lacuna::ingest::text::read_signal_csv(path, 100.0).is_ok()
}

fn events_csv_target(path: &Path) -> bool {
    lacuna::ingest::text::read_events_csv(path).is_ok()
}

fn mask_csv_target(path: &Path) -> bool {
    lacuna::trials::io::read_mask(path, 3, 4).is_ok()
}

fn main() {
    let only = std::env::args().skip(1).find(|a| !a.starts_with('-'));
    let targets: [(&str, &str, &str, Target); 5] = [
        ("edf", "edf", "edf", edf_target),
        ("npy", "npy", "npy", npy_target),
        ("signal-csv", "signal-csv", "csv", signal_csv_target),
        ("events-csv", "events-csv", "csv", events_csv_target),
        ("mask-csv", "mask-csv", "csv", mask_csv_target),
    ];
    for (name, kind, ext, target) in targets {
        if only.as_deref().is_none_or(|o| name.contains(o)) {
            fuzz(name, kind, ext, target);
        }
    }
}

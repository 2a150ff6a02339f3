//! The seeded generator of the invented vineyard records (the shipped
//! sample `data/samples/vineyard_irrigation.csv` and the end-to-end tests'
//! files), and helpers to run the `fit_csv` example.
//!
//! Scenario (invented): Larkspur Ridge, a hillside vineyard, logs one drip
//! irrigation block day by day through a season: air temperature, wind,
//! soil moisture, the canopy's ground cover, the water the block drew, and
//! a weight for the meter reading (1 for the main meter, 0.25 on days read
//! from the coarse backup meter, 0 on days the meters were offline). The
//! "true" effects below are made up for the demo.
//!
//! Only `+ - * /` and rounding are used on the random draws, so every
//! platform writes the same text.
#![allow(dead_code)]

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::atomic::{AtomicUsize, Ordering};

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Header of the vineyard files.
pub const HEADER: &str =
    "day,air_temp [C],wind [m/s],soil_moisture [%],canopy [%],meter_weight,water [m3]";

/// The vineyard records: the CSV text and, per row, the predictor values
/// (air_temp, wind, soil_moisture, canopy), the weight and the water drawn,
/// exactly as written.
pub struct Records {
    pub csv: String,
    pub x: Vec<[f64; 4]>,
    pub w: Vec<f64>,
    pub y: Vec<f64>,
}

/// Roughly standard normal: the sum of twelve uniforms, less six.
fn bell(rng: &mut ChaCha8Rng) -> f64 {
    (0..12).map(|_| rng.random::<f64>()).sum::<f64>() - 6.0
}

fn round(v: f64, decimals: i32) -> f64 {
    let s = 10f64.powi(decimals);
    (v * s).round() / s
}

/// `days` days of records from `seed`.
pub fn vineyard(days: usize, seed: u64) -> Records {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut csv = String::new();
    let _ = writeln!(csv, "{HEADER}");
    let (mut x, mut w, mut y) = (Vec::new(), Vec::new(), Vec::new());
    for d in 0..days {
        let s = d as f64 / days.max(1) as f64;
        let warm = 1.0 - 4.0 * (s - 0.5) * (s - 0.5);
        let air = round(14.0 + 14.0 * warm + 3.0 * bell(&mut rng), 1);
        let wind = round((2.5 + 1.2 * bell(&mut rng)).abs(), 1);
        let rain = if rng.random::<f64>() < 0.08 { 9.0 } else { 0.0 };
        let soil = round(32.0 - 10.0 * warm + rain + 4.0 * bell(&mut rng), 1);
        let canopy = round(
            (20.0 + 65.0 * (1.6 * s).min(1.0) + 3.0 * bell(&mut rng)).min(100.0),
            1,
        );
        let (weight, spread) = match d % 53 {
            17 | 40 => (0.0, 0.0),
            _ if d % 10 == 7 => (0.25, 2.0),
            _ => (1.0, 1.0),
        };
        // A valve left open one day in the season: a row that stands out.
        let valve = if d == days * 3 / 5 { 9.0 } else { 0.0 };
        let water = if weight == 0.0 {
            0.0
        } else {
            round(
                (5.0 + 0.62 * air + 0.85 * wind - 0.38 * soil
                    + 0.09 * canopy
                    + valve
                    + 1.1 * spread * bell(&mut rng))
                .max(0.1),
                2,
            )
        };
        let _ = writeln!(
            csv,
            "{},{air},{wind},{soil},{canopy},{weight},{water}",
            d + 1
        );
        x.push([air, wind, soil, canopy]);
        w.push(weight);
        y.push(water);
    }
    Records { csv, x, w, y }
}

/// The example's binary, built by `cargo test` (it builds the examples)
/// or by `cargo build --release --features serde --example fit_csv`.
pub fn binary() -> PathBuf {
    let exe = std::env::current_exe().expect("test executable path");
    // target/<profile>/deps/fit_csv-<hash> -> target/<profile>
    let profile_dir = exe
        .parent()
        .and_then(Path::parent)
        .expect("test executable lies in target/<profile>/deps");
    let bin = profile_dir
        .join("examples")
        .join(format!("fit_csv{}", std::env::consts::EXE_SUFFIX));
    assert!(
        bin.exists(),
        "{} is missing: run `cargo test --features serde` (which builds the examples) or \
         `cargo build --features serde --example fit_csv` with this profile first",
        bin.display()
    );
    bin
}

/// A folder of its own under the system's temporary folder, removed on drop.
pub struct Scratch(pub PathBuf);

impl Scratch {
    pub fn new(tag: &str) -> Self {
        static NEXT: AtomicUsize = AtomicUsize::new(0);
        let n = NEXT.fetch_add(1, Ordering::Relaxed);
        let dir = std::env::temp_dir().join(format!(
            "leastline-fit-csv-{}-{tag}-{n}",
            std::process::id()
        ));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).expect("scratch folder");
        Scratch(dir)
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.0.join(name)
    }

    pub fn write(&self, name: &str, text: &str) -> PathBuf {
        let p = self.path(name);
        std::fs::write(&p, text).expect("write scratch file");
        p
    }
}

impl Drop for Scratch {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// Runs the example with `args`.
pub fn run<S: AsRef<std::ffi::OsStr>>(args: &[S]) -> Output {
    Command::new(binary())
        .args(args)
        .output()
        .expect("start the fit_csv example")
}

/// Runs it and parses its stdout as JSON, failing with its stderr if it
/// did not succeed.
pub fn run_json<S: AsRef<std::ffi::OsStr>>(args: &[S]) -> serde_json::Value {
    let out = run(args);
    assert!(
        out.status.success(),
        "fit_csv failed ({:?}): {}",
        out.status.code(),
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("stdout is one JSON object")
}

/// Significant digits of agreement, `-log10(|a - b| / |b|)`, capped at 16.
pub fn digits(a: f64, b: f64) -> f64 {
    let e = (a - b).abs();
    if e == 0.0 {
        16.0
    } else {
        (-(e / b.abs().max(f64::MIN_POSITIVE)).log10()).min(16.0)
    }
}

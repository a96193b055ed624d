//! Writes the invented demo data sets of `samples/`:
//!
//! - `pump_health.csv`: 600 readings (200 per state) of a centrifugal pump's controller, six
//!   features and a `label` column (`normal`, `cavitation`, `worn_bearing`). Each state draws its
//!   features from independent normal distributions whose means and spreads are set below; the
//!   states overlap, so a good classifier reaches about 95-99 % rather than 100 %.
//! - `greenhouse_humidity.csv`: 500 rows of four climate readings and the relative humidity one
//!   hour later, from a made-up smooth response plus noise.
//!
//! Nothing here is measured data. The draws use SplitMix64 (seeded, so the files are identical on
//! every run) and Box–Muller normals from `sinew-runtime`.
//!
//! Run: `cargo run -p sinew --example demo_data -- samples`

use sinew_runtime::rng::SplitMix64;
use std::fmt::Write;

/// (state, [(mean, std); 6]) for vib_rms_mm_s, vib_peak_hz, suction_kpa, discharge_kpa,
/// motor_current_a, bearing_temp_c.
const PUMP_STATES: [(&str, [(f64, f64); 6]); 3] = [
    (
        "normal",
        [
            (2.2, 0.7),
            (50.0, 12.0),
            (92.0, 7.0),
            (405.0, 20.0),
            (12.0, 0.9),
            (46.0, 5.0),
        ],
    ),
    (
        "cavitation",
        [
            (3.6, 1.1),
            (95.0, 30.0),
            (72.0, 11.0),
            (375.0, 28.0),
            (11.3, 1.1),
            (48.0, 5.5),
        ],
    ),
    (
        "worn_bearing",
        [
            (3.9, 1.2),
            (120.0, 30.0),
            (90.0, 8.0),
            (398.0, 22.0),
            (13.1, 1.1),
            (57.0, 7.0),
        ],
    ),
];

fn pump(rng: &mut SplitMix64) -> String {
    let mut s = String::from(
        "vib_rms_mm_s,vib_peak_hz,suction_kpa,discharge_kpa,motor_current_a,bearing_temp_c,label\n",
    );
    for i in 0..600 {
        let (name, dist) = PUMP_STATES[i % 3];
        for (mean, std) in dist {
            let _ = write!(s, "{:.3},", mean + std * rng.normal());
        }
        let _ = writeln!(s, "{name}");
    }
    s
}

fn greenhouse(rng: &mut SplitMix64) -> String {
    let mut s =
        String::from("air_temp_c,humidity_now_pct,vent_open_pct,irrigation_l,humidity_next_pct\n");
    for _ in 0..500 {
        let temp = rng.uniform(14.0, 34.0);
        let rh = rng.uniform(35.0, 95.0);
        let vent = rng.uniform(0.0, 100.0);
        let water = rng.uniform(0.0, 40.0);
        // Made-up response: venting pulls humidity towards 55 %, warm air dries, irrigation adds.
        let next = rh + (55.0 - rh) * 0.006 * vent - 0.35 * (temp - 22.0)
            + 8.0 * (1.0 - (-water / 15.0).exp())
            + 1.5 * rng.normal();
        let _ = writeln!(
            s,
            "{temp:.2},{rh:.2},{vent:.1},{water:.2},{:.2}",
            next.clamp(5.0, 100.0)
        );
    }
    s
}

fn main() -> std::io::Result<()> {
    let dir = std::env::args().nth(1).unwrap_or_else(|| "samples".into());
    let dir = std::path::Path::new(&dir);
    let mut rng = SplitMix64::new(2026);
    std::fs::write(dir.join("pump_health.csv"), pump(&mut rng))?;
    let mut rng = SplitMix64::new(2027);
    std::fs::write(dir.join("greenhouse_humidity.csv"), greenhouse(&mut rng))?;
    Ok(())
}

//! Writes the invented demo data sets of `samples/`:
//!
//! - `pump_health.csv`: 600 readings (200 per state) of a centrifugal pump's controller, six
//!   features and a `label` column (`normal`, `cavitation`, `worn_bearing`). Each state draws its
//!   features from independent normal distributions whose means and spreads are set below; the
//!   states overlap, so a good classifier reaches about 95-99 % rather than 100 %.
//! - `greenhouse_humidity.csv`: 500 rows of four climate readings and the relative humidity one
//!   hour later, from a made-up smooth response plus noise.
//! - `gearbox_window.csv`: 360 windows (120 per state) of a gearbox's three-axis accelerometer,
//!   48 steps of `x`, `y`, `z` each (144 columns, row-major: step by step, the axis fastest) and a
//!   `label` column (`healthy`, `imbalance`, `bearing_fault`). Every window is noise (normal,
//!   std 0.4) on a shaft tone of a random period of 10 to 14 steps and random phase: weak on every
//!   axis when healthy (amplitude 0.3); strong on `x` and `y` with an imbalance (amplitude 0.6 to
//!   1.0, `y` a quarter turn behind `x`); with a bearing fault, the healthy tone plus a train of
//!   short ringing impulses every 7 to 9 steps from a random start (peak 0.9 to 1.5, decaying as
//!   `e^(-k/1.5)` over 5 steps with alternating sign, full on `z`, 0.6 of it on `y`).
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

/// Steps and axes of one gearbox window.
const GEARBOX_STEPS: usize = 48;
const GEARBOX_AXES: usize = 3;

fn gearbox(rng: &mut SplitMix64) -> String {
    let mut s = String::new();
    for t in 0..GEARBOX_STEPS {
        for axis in ["x", "y", "z"] {
            let _ = write!(s, "{axis}{t},");
        }
    }
    s.push_str("label\n");
    let tau = std::f64::consts::TAU;
    for i in 0..360 {
        let state = ["healthy", "imbalance", "bearing_fault"][i % 3];
        let period = rng.uniform(10.0, 14.0);
        let phase = rng.uniform(0.0, tau);
        let (amp, ring) = match state {
            "imbalance" => (rng.uniform(0.6, 1.0), None),
            "bearing_fault" => (
                0.3,
                Some((
                    rng.uniform(7.0, 9.0).round() as usize,
                    rng.uniform(0.0, 8.0) as usize,
                    rng.uniform(0.9, 1.5),
                )),
            ),
            _ => (0.3, None),
        };
        let mut w = [[0.0f64; GEARBOX_AXES]; GEARBOX_STEPS];
        for (t, row) in w.iter_mut().enumerate() {
            let a = tau * t as f64 / period + phase;
            let tone = [amp * a.sin(), amp * (a - tau / 4.0).sin(), 0.3 * a.sin()];
            let tone = if state == "imbalance" {
                tone
            } else {
                [0.3 * a.sin(), 0.3 * (a - tau / 4.0).sin(), 0.3 * a.sin()]
            };
            for (v, tone) in row.iter_mut().zip(tone) {
                *v = tone + 0.4 * rng.normal();
            }
        }
        if let Some((every, start, peak)) = ring {
            let mut at = start;
            while at < GEARBOX_STEPS {
                for k in 0..5 {
                    if let Some(row) = w.get_mut(at + k) {
                        let sign = if k % 2 == 0 { 1.0 } else { -1.0 };
                        let v = sign * peak * (-(k as f64) / 1.5).exp();
                        row[2] += v;
                        row[1] += 0.6 * v;
                    }
                }
                at += every;
            }
        }
        for row in &w {
            for v in row {
                let _ = write!(s, "{v:.3},");
            }
        }
        let _ = writeln!(s, "{state}");
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
    let mut rng = SplitMix64::new(2028);
    std::fs::write(dir.join("gearbox_window.csv"), gearbox(&mut rng))?;
    Ok(())
}

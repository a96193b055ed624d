// Shared by `build.rs` (which bakes these values into generated code) and the library (whose
// tests check that the baked statics hold exactly these bits). Plain code, no imports.

/// The value baked at position `k` of parameter array `array` (arrays counted in model order:
/// each layer's weights, then its biases). Covers the awkward cases of exact round-tripping:
/// negative zero, a value that is subnormal in `f32`, thirds, large magnitudes, pi.
pub fn baked_value(array: usize, k: usize) -> f64 {
    let a = array as f64 + 1.0;
    match k % 5 {
        0 => -0.0,
        1 => a / 3.0,
        2 => 1e-40 * (k as f64),
        3 => -(k as f64 + 0.5) * 1e5,
        _ => core::f64::consts::PI / (k as f64 + a),
    }
}

/// The baked input mean at feature `k`.
pub fn baked_mean(k: usize) -> f64 {
    0.25 * k as f64 - 0.1
}

/// The baked input standard deviation at feature `k`.
pub fn baked_std(k: usize) -> f64 {
    1.0 + k as f64 / 7.0
}

// The fixed inputs of the device run, shared by the firmware (`src/lib.rs` includes this file)
// and by the host test that recomputes every printed value (`tests/tests/device.rs` includes it
// too). Plain data, no imports. Invented readings of a centrifugal pump, in the units of the
// columns of `samples/pump_health.csv`: vibration RMS (mm/s), vibration peak (Hz), suction
// (kPa), discharge (kPa), motor current (A), bearing temperature (deg C).

/// Raw sensor readings the firmware classifies with the baked model: two near each class's usual
/// operating point, then one far outside the training data (saturated units).
pub const RAW_INPUTS: [[f32; 6]; 7] = [
    [2.05, 48.3, 93.1, 404.0, 11.9, 44.8],
    [1.72, 55.1, 90.4, 398.5, 12.3, 46.9],
    [3.61, 101.2, 68.4, 365.7, 11.2, 47.5],
    [3.20, 88.7, 73.9, 379.4, 11.6, 49.0],
    [4.10, 121.9, 89.6, 396.2, 13.3, 58.8],
    [3.82, 112.4, 91.3, 401.0, 12.9, 55.6],
    [9.50, 240.0, 40.0, 300.0, 16.0, 80.0],
];

/// Samples a technician confirmed on a pump whose bearing-temperature sensor reads about 6 deg C
/// high, which the device learns from.
pub const NEW_INPUTS: [[f32; 6]; 8] = [
    [2.21, 51.0, 92.0, 401.2, 12.1, 51.9],
    [1.95, 46.2, 94.3, 407.5, 11.8, 50.6],
    [3.48, 97.5, 70.2, 369.9, 11.3, 54.4],
    [3.71, 92.1, 67.8, 371.0, 11.5, 53.8],
    [3.89, 118.0, 90.8, 398.8, 13.1, 62.7],
    [4.02, 124.6, 88.9, 394.1, 13.4, 64.1],
    [2.34, 58.9, 91.1, 399.0, 12.0, 52.3],
    [3.55, 105.3, 72.5, 367.2, 11.0, 55.0],
];

/// The confirmed class of each of `NEW_INPUTS`: 0 normal, 1 cavitation, 2 worn bearing.
pub const NEW_LABELS: [usize; 8] = [0, 0, 1, 1, 2, 2, 0, 1];

/// On-device training steps (each over all of `NEW_INPUTS`).
pub const TRAIN_STEPS: usize = 12;

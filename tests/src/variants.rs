// Shared by `build.rs` (which compiles these variants into the library) and the tests that
// generate the same variants themselves (`tests/panic_free.rs`). Plain code, no imports.

/// Models compiled a second time with element-level unrolling (every layer of them is below
/// [`UNROLL_BELOW`] weights).
pub const UNROLLED: [&str; 5] = [
    "valve_gate",
    "relay_pair",
    "tank_level",
    "door_sensor",
    "bearing_wear",
];
/// Unrolling threshold of the [`UNROLLED`] models.
pub const UNROLL_BELOW: usize = 64;
/// Models compiled a third time with baked weights.
pub const BAKED: [&str; 2] = ["valve_gate", "light_level"];

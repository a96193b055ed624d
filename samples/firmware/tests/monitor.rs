//! The firmware library on the host: it classifies, records and learns (invented data).

use sinew_firmware_sample::{Class, PumpMonitor, INPUTS};

static MONITOR: std::sync::Mutex<PumpMonitor> = std::sync::Mutex::new(PumpMonitor::new());

fn reading(state: Class, k: usize) -> [f32; INPUTS] {
    let base = match state {
        Class::Normal => 0.0,
        Class::Cavitation => 1.0,
        Class::WornBearing => -1.0,
    };
    core::array::from_fn(|i| base * (1.0 + 0.1 * i as f32) + 0.01 * k as f32)
}

#[test]
fn the_monitor_learns_confirmed_samples() {
    let mut m = MONITOR.lock().expect("not poisoned");
    m.start(7, &[0.0; INPUTS], &[1.0; INPUTS]);
    assert_eq!(m.learn(), 0.0);
    for k in 0..8 {
        let state = Class::ALL[k % 3];
        m.record(&reading(state, k), state);
    }
    let first = m.learn();
    let mut last = first;
    for _ in 0..200 {
        last = m.learn();
    }
    assert!(last < 0.5 * first, "{first} -> {last}");
    assert_eq!(m.steps(), 201);
    for state in Class::ALL {
        assert_eq!(m.classify(&reading(state, 3)).0, state);
    }
}

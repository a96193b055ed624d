//! A pump monitor for a microcontroller: classifies the pump's state from six vibration and
//! pressure features and keeps learning on the device from labelled samples a technician
//! confirms (invented scenario).
//!
//! The network is generated at build time by sinew from `models/pump_health.sinew` (see
//! `build.rs`; a copy of `samples/pump_health.sinew`, checked equal to it by the workspace's
//! tests); this crate is `no_std`, allocates nothing and has no `unsafe`. Everything large is
//! held in one [`PumpMonitor`], which a firmware keeps in a `static` (its constructor is a
//! `const fn`), so no parameter array is ever copied through the stack.
//!
//! Build it for a Cortex-M4F board with
//! `rustup target add thumbv7em-none-eabihf` and
//! `cargo build -p sinew-firmware-sample --target thumbv7em-none-eabihf`.

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

include!(concat!(env!("OUT_DIR"), "/pump_health.rs"));

pub use pump_health::{Class, INPUTS, OUTPUTS};

/// How many confirmed samples the monitor keeps for learning (a ring).
pub const WINDOW: usize = 8;

/// The monitor: the trainer (parameters, gradient and Adam state) and a ring of confirmed
/// samples.
pub struct PumpMonitor {
    trainer: pump_health::Trainer,
    xs: [[f32; INPUTS]; WINDOW],
    ys: [[f32; OUTPUTS]; WINDOW],
    filled: usize,
    next: usize,
}

impl Default for PumpMonitor {
    fn default() -> Self {
        Self::new()
    }
}

impl PumpMonitor {
    /// An empty monitor with zeroed parameters; call [`PumpMonitor::start`] before use.
    pub const fn new() -> Self {
        PumpMonitor {
            trainer: pump_health::Trainer::zeroed(),
            xs: [[0.0; INPUTS]; WINDOW],
            ys: [[0.0; OUTPUTS]; WINDOW],
            filled: 0,
            next: 0,
        }
    }

    /// Draws fresh parameters from `seed` (the spec's init), sets the input scaling measured at
    /// commissioning, and forgets every recorded sample and all optimizer state.
    pub fn start(&mut self, seed: u64, mean: &[f32; INPUTS], std: &[f32; INPUTS]) {
        self.trainer.params.init_in_place(seed);
        self.trainer.params.input_mean = *mean;
        self.trainer.params.input_std = *std;
        self.trainer.reset();
        self.filled = 0;
        self.next = 0;
    }

    /// The most likely state of the pump and its probability.
    pub fn classify(&self, features: &[f32; INPUTS]) -> (Class, f32) {
        self.trainer.params.classify(features)
    }

    /// Records a sample whose state a technician confirmed, replacing the oldest once the ring
    /// is full.
    pub fn record(&mut self, features: &[f32; INPUTS], state: Class) {
        if let (Some(x), Some(y)) = (self.xs.get_mut(self.next), self.ys.get_mut(self.next)) {
            *x = *features;
            *y = state.target();
        }
        self.next = (self.next + 1) % WINDOW;
        self.filled = (self.filled + 1).min(WINDOW);
    }

    /// One Adam step over the recorded samples; returns their cost before the step (0 when
    /// nothing is recorded).
    pub fn learn(&mut self) -> f32 {
        let xs = self.xs.get(..self.filled).unwrap_or(&[]);
        let ys = self.ys.get(..self.filled).unwrap_or(&[]);
        self.trainer.step(xs, ys)
    }

    /// Updates done so far.
    pub fn steps(&self) -> u32 {
        self.trainer.steps
    }
}

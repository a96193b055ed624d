//! Instruction counting: one inference and one training step between marker functions, and an
//! empty pair of markers to calibrate. Run under QEMU with one instruction per translation block
//! and `-d exec`, every executed instruction is one log line; the host test counts the lines
//! between the markers and subtracts the empty pair. These are instructions, not cycles.

#![no_std]
#![no_main]
#![deny(unsafe_code)]

use core::hint::black_box;
use sinew_device_sample::{
    board, demo, gearbox_window, infer, infer_window, pump_health, train_step, train_window_step,
};

// Distinct bodies, so that no two markers are merged into one address.

/// Start of the empty calibration region.
#[inline(never)]
pub fn mark_empty_begin() {
    black_box(1u32);
}

/// End of the empty calibration region.
#[inline(never)]
pub fn mark_empty_end() {
    black_box(2u32);
}

/// Start of the inference.
#[inline(never)]
pub fn mark_infer_begin() {
    black_box(3u32);
}

/// End of the inference.
#[inline(never)]
pub fn mark_infer_end() {
    black_box(4u32);
}

/// Start of the training step.
#[inline(never)]
pub fn mark_step_begin() {
    black_box(5u32);
}

/// End of the training step.
#[inline(never)]
pub fn mark_step_end() {
    black_box(6u32);
}

/// Start of the shaped model's inference.
#[inline(never)]
pub fn mark_window_begin() {
    black_box(7u32);
}

/// End of the shaped model's inference.
#[inline(never)]
pub fn mark_window_end() {
    black_box(8u32);
}

/// Start of the shaped model's training step.
#[inline(never)]
pub fn mark_window_step_begin() {
    black_box(9u32);
}

/// End of the shaped model's training step.
#[inline(never)]
pub fn mark_window_step_end() {
    black_box(10u32);
}

/// The shaped model's inference and one training step, in a frame of their own.
#[inline(never)]
fn window() {
    let [x, ..] = demo::WINDOWS;
    let x = black_box(x);
    let params = black_box(&gearbox_window::TRAINED);
    let mut ys = [[0.0f32; gearbox_window::OUTPUTS]; demo::WINDOW_LABELS.len()];
    for (y, &label) in ys.iter_mut().zip(demo::WINDOW_LABELS.iter()) {
        *y = gearbox_window::Class::from_index(label).map_or(*y, gearbox_window::Class::target);
    }
    let mut trainer = gearbox_window::Trainer::zeroed();
    trainer.params.clone_from(&gearbox_window::TRAINED);

    mark_window_begin();
    let out = infer_window(params, &x);
    mark_window_end();

    mark_window_step_begin();
    let cost = train_window_step(&mut trainer, &demo::WINDOW_NEW, &ys);
    mark_window_step_end();

    black_box((out, cost));
}

/// The pump model's inference and one training step, in a frame of their own (so that its
/// trainer is gone when the shaped model's runs: the smallest board has 16 KiB of RAM).
#[inline(never)]
fn pump() {
    let [x, ..] = demo::RAW_INPUTS;
    let x = black_box(x);
    let params = black_box(&pump_health::TRAINED);
    let mut ys = [[0.0f32; pump_health::OUTPUTS]; demo::NEW_LABELS.len()];
    for (y, &label) in ys.iter_mut().zip(demo::NEW_LABELS.iter()) {
        *y = pump_health::Class::from_index(label).map_or(*y, pump_health::Class::target);
    }
    let mut trainer = pump_health::Trainer::new(pump_health::TRAINED.clone());

    mark_empty_begin();
    mark_empty_end();

    mark_infer_begin();
    let out = infer(params, &x);
    mark_infer_end();

    mark_step_begin();
    let cost = train_step(&mut trainer, &demo::NEW_INPUTS, &ys);
    mark_step_end();

    black_box((out, cost));
}

#[cfg_attr(target_arch = "arm", cortex_m_rt::entry)]
#[cfg_attr(target_arch = "riscv32", riscv_rt::entry)]
fn main() -> ! {
    pump();
    window();
    board::exit(true)
}

//! The device run: prints every inference, blob check and training step for the host test to
//! compare (see `sinew_device_sample::run`), then exits with status 0 when every on-device check
//! passed.

#![no_std]
#![no_main]
#![deny(unsafe_code)]

use sinew_device_sample::{board, done, gearbox_window, line::Console, run, run_window, Workspace};

/// The pump model: about 3.8 KiB (the trainer and one blob buffer) in this frame, above
/// everything the stack measurements paint.
#[inline(never)]
fn pump(console: &mut impl Console) -> bool {
    let mut ws = Workspace::new();
    run(env!("SINEW_DEVICE_TARGET"), console, &mut ws)
}

/// The shaped model, in a frame of its own once the pump's is gone (its trainer holds about
/// 5.3 KiB), so that the two never share the 16 KiB of the smallest board.
#[inline(never)]
fn window(console: &mut impl Console) -> bool {
    // Built in place: zeroed, then the baked weights copied over its parameters (no temporary
    // copy of the parameters on the stack).
    let mut trainer = gearbox_window::Trainer::zeroed();
    trainer.params.clone_from(&gearbox_window::TRAINED);
    run_window(console, &mut trainer)
}

#[cfg_attr(target_arch = "arm", cortex_m_rt::entry)]
#[cfg_attr(target_arch = "riscv32", riscv_rt::entry)]
fn main() -> ! {
    let mut console = board::console();
    let ok = pump(&mut console);
    let ok = window(&mut console) && ok;
    done(&mut console, ok);
    board::exit(ok)
}

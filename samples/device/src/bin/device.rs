//! The device run: prints every inference, blob check and training step for the host test to
//! compare (see `sinew_device_sample::run`), then exits with status 0 when every on-device check
//! passed.

#![no_std]
#![no_main]
#![deny(unsafe_code)]

use sinew_device_sample::{board, run, Workspace};

#[cfg_attr(target_arch = "arm", cortex_m_rt::entry)]
#[cfg_attr(target_arch = "riscv32", riscv_rt::entry)]
fn main() -> ! {
    // About 3.8 KiB: the trainer and one blob buffer, on the stack of `main`, above everything
    // the stack measurements paint.
    let mut ws = Workspace::new();
    let mut console = board::console();
    let ok = run(env!("SINEW_DEVICE_TARGET"), &mut console, &mut ws);
    board::exit(ok)
}

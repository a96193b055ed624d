//! Proves that the no-panic check can see a panic: this image indexes an array with a number
//! the compiler cannot know, so it must keep a bounds check and `core::panicking`. The host test
//! asserts that the check finds it here and finds nothing in the device image.

#![no_std]
#![no_main]
#![deny(unsafe_code)]

use core::hint::black_box;
use sinew_device_sample::{board, demo};

#[cfg_attr(target_arch = "arm", cortex_m_rt::entry)]
#[cfg_attr(target_arch = "riscv32", riscv_rt::entry)]
fn main() -> ! {
    let i = black_box(3usize);
    #[allow(clippy::indexing_slicing)]
    let x = demo::RAW_INPUTS[i];
    black_box(x);
    board::exit(true)
}

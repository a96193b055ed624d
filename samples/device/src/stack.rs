//! Stack high-water mark by painting: fill the unused stack below the current stack pointer with
//! a pattern, run the code under test, then find the lowest word that no longer holds the
//! pattern. A measurement aid for the emulated boards, not part of the model.
//!
//! This is the only module of the crate with `unsafe` code: reading the stack pointer, finding
//! where the statics end, and volatile accesses to the free stack below the stack pointer.

#![allow(unsafe_code)]

/// The word painted into free stack. A value that code rarely writes by chance.
const PATTERN: u32 = 0xC5A3_5A3C;

/// Bytes painted at most (less when the statics end closer to the stack pointer).
pub const SPAN: usize = 8192;

/// The stack a call used.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Usage {
    /// Bytes between the stack pointer at the call and the deepest word written during it.
    pub bytes: usize,
    /// Bytes that were painted; `bytes == painted` means the call may have gone deeper.
    pub painted: usize,
}

#[cfg(target_arch = "arm")]
#[inline(always)]
fn stack_pointer() -> usize {
    let sp: usize;
    // SAFETY: reads the stack pointer into a register; touches no memory.
    unsafe {
        core::arch::asm!("mov {}, sp", out(reg) sp, options(nomem, nostack, preserves_flags))
    };
    sp
}

#[cfg(target_arch = "riscv32")]
#[inline(always)]
fn stack_pointer() -> usize {
    let sp: usize;
    // SAFETY: reads the stack pointer into a register; touches no memory.
    unsafe { core::arch::asm!("mv {}, sp", out(reg) sp, options(nomem, nostack, preserves_flags)) };
    sp
}

/// The first address past the statics (`.bss` and `.uninit`), where the free stack ends.
#[cfg(any(target_arch = "arm", target_arch = "riscv32"))]
fn statics_end() -> usize {
    extern "C" {
        // Defined by the link scripts of cortex-m-rt and riscv-rt: the start of the (empty) heap,
        // right after the statics.
        static __sheap: u32;
    }
    // Only the address of the linker symbol is taken; it is never read.
    core::ptr::addr_of!(__sheap) as usize
}

/// Runs `f` and returns the stack it used, measured by painting.
///
/// Interrupts must be off (they are on the emulated boards: nothing enables them), since an
/// interrupt taken during the measurement would write into the painted area.
#[cfg(any(target_arch = "arm", target_arch = "riscv32"))]
#[inline(never)]
pub fn measure(f: &mut dyn FnMut()) -> Usage {
    let sp = stack_pointer() & !3;
    let low = sp.saturating_sub(SPAN).max((statics_end() + 3) & !3);
    let mut addr = low;
    while addr < sp {
        // SAFETY: `[low, sp)` is free stack below the stack pointer, above every static; with
        // interrupts off nothing else uses it, and it is word aligned.
        unsafe { core::ptr::write_volatile(addr as *mut u32, PATTERN) };
        addr += 4;
    }
    f();
    let mut lowest = sp;
    let mut addr = low;
    while addr < sp {
        // SAFETY: as above; the words were written by the loop before.
        let v = unsafe { core::ptr::read_volatile(addr as *const u32) };
        if v != PATTERN {
            lowest = addr;
            break;
        }
        addr += 4;
    }
    Usage {
        bytes: sp - lowest,
        painted: sp - low,
    }
}

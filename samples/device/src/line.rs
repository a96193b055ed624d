//! One output line at a time, formatted without `core::fmt`: words, decimal integers and hex bit
//! patterns into a fixed buffer. Keeping `core::fmt` out of the image keeps the no-panic check
//! about the model and the runtime, not about the formatting machinery.

/// Where lines go (semihosting on the boards).
pub trait Console {
    /// Writes `bytes` as they are.
    fn write(&mut self, bytes: &[u8]);
}

/// Bytes one line can hold, with its newline; text beyond is dropped.
pub const CAPACITY: usize = 160;

/// A line being built.
pub struct Line {
    buf: [u8; CAPACITY],
    len: usize,
}

impl Default for Line {
    fn default() -> Self {
        Self::new()
    }
}

const HEX: &[u8; 16] = b"0123456789abcdef";

impl Line {
    /// An empty line.
    pub const fn new() -> Self {
        Line {
            buf: [0; CAPACITY],
            len: 0,
        }
    }

    fn byte(&mut self, b: u8) -> &mut Self {
        // The last byte is kept for the newline.
        if self.len + 1 < CAPACITY {
            if let Some(slot) = self.buf.get_mut(self.len) {
                *slot = b;
                self.len += 1;
            }
        }
        self
    }

    /// Appends text.
    pub fn text(&mut self, s: &str) -> &mut Self {
        for &b in s.as_bytes() {
            self.byte(b);
        }
        self
    }

    /// Appends `n` in decimal.
    pub fn dec(&mut self, n: usize) -> &mut Self {
        let mut digits = [0u8; 20];
        let mut k = 0;
        let mut v = n;
        for d in digits.iter_mut() {
            *d = b'0' + (v % 10) as u8;
            k += 1;
            v /= 10;
            if v == 0 {
                break;
            }
        }
        for &d in digits.iter().take(k).rev() {
            self.byte(d);
        }
        self
    }

    /// Appends the low `digits` hex digits of `v`, most significant first, without a prefix.
    pub fn hex(&mut self, v: u64, digits: u32) -> &mut Self {
        for i in (0..digits.min(16)).rev() {
            let nibble = ((v >> (4 * i)) & 0xF) as usize;
            self.byte(HEX.get(nibble).copied().unwrap_or(b'?'));
        }
        self
    }

    /// Appends the bit pattern of `v` as 8 hex digits (exact, unlike a decimal rendering).
    pub fn bits(&mut self, v: f32) -> &mut Self {
        self.hex(u64::from(v.to_bits()), 8)
    }

    /// Appends the bit patterns of `vs`, separated by commas.
    pub fn bits_list(&mut self, vs: &[f32]) -> &mut Self {
        for (i, &v) in vs.iter().enumerate() {
            if i > 0 {
                self.byte(b',');
            }
            self.bits(v);
        }
        self
    }

    /// Ends the line with `\n`, writes it to `out` and empties the buffer.
    pub fn send(&mut self, out: &mut impl Console) {
        if let Some(slot) = self.buf.get_mut(self.len) {
            *slot = b'\n';
            self.len += 1;
        }
        out.write(self.buf.get(..self.len).unwrap_or(&[]));
        self.len = 0;
    }
}

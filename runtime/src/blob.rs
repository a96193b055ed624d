//! The device weight blob: a model's parameter values as little-endian bytes, checked on load.
//!
//! A blob carries every value of a generated `Params` (each layer's weights row-major, then its
//! biases, layer by layer; then, with `standardize`, the input mean and the input std), framed so
//! that a device can refuse anything that is not exactly the model it runs:
//!
//! | offset | bytes | field | value |
//! | --- | --- | --- | --- |
//! | 0 | 4 | magic | [`MAGIC`], the ASCII bytes `SNWB` |
//! | 4 | 2 | format version | [`VERSION`], `u16` little-endian |
//! | 6 | 1 | scalar kind | [`ScalarKind`]: 1 = `f32`, 2 = `f64` |
//! | 7 | 1 | reserved | 0 |
//! | 8 | 8 | fingerprint | the model's `FINGERPRINT`, `u64` little-endian |
//! | 16 | 4 | value count | `n`, `u32` little-endian |
//! | 20 | `n * s` | values | IEEE 754 binary32 (`s = 4`) or binary64 (`s = 8`), little-endian |
//! | `20 + n * s` | 4 | checksum | CRC-32 of bytes `0 .. 20 + n * s`, `u32` little-endian |
//!
//! The whole blob is `24 + n * s` bytes ([`blob_bytes`]). The checksum is the CRC-32 of IEEE
//! 802.3 ([`crc32`]), so every single-bit error and every burst of errors within 32 consecutive
//! bits is detected. Not every odd number of flipped bits is: the generator has 15 terms, so it
//! lacks the factor `x + 1`.
//!
//! [`Values::open`] checks a blob against what the model expects, in this order, and says which
//! check failed ([`BlobError`]): the length holds at least a header and a checksum, the magic,
//! the version, the reserved byte, the scalar kind, the fingerprint, the value count, the exact
//! total length, and last the checksum. Only a blob that passes every check yields values, so a
//! generated `load_blob` leaves its parameters untouched on any error.
//!
//! Nothing here allocates or panics: bytes are read with `get`, `zip` and `split_at_checked`, never
//! by computed index.
//!
//! # Examples
//!
//! Two `f32` values, written and read back:
//!
//! ```
//! use sinew_runtime::blob::{blob_bytes, BlobError, ScalarKind, Values, Writer};
//!
//! const FINGERPRINT: u64 = 0x0123_4567_89ab_cdef;
//! let mut buf = [0u8; blob_bytes(ScalarKind::F32, 2)];
//! let mut w = Writer::<f32>::new(&mut buf, FINGERPRINT, 2)?;
//! w.write(&[1.5, -0.25]);
//! assert_eq!(w.finish()?, 32);
//!
//! let mut values = Values::<f32>::open(&buf, FINGERPRINT, 2)?;
//! let mut back = [0.0f32; 2];
//! values.read_into(&mut back);
//! assert_eq!(back, [1.5, -0.25]);
//!
//! // Another model's fingerprint is refused before anything is read.
//! assert!(matches!(
//!     Values::<f32>::open(&buf, 7, 2),
//!     Err(BlobError::Fingerprint { found: FINGERPRINT, expected: 7 })
//! ));
//! # Ok::<(), BlobError>(())
//! ```

use core::fmt;
use core::marker::PhantomData;

/// The first four bytes of every blob: ASCII `SNWB`.
pub const MAGIC: [u8; 4] = *b"SNWB";

/// The format version this runtime reads and writes.
pub const VERSION: u16 = 1;

/// Bytes before the first value: magic, version, scalar kind, reserved byte, fingerprint, count.
pub const HEADER_BYTES: usize = 20;

/// Bytes of the trailing CRC-32.
pub const CHECKSUM_BYTES: usize = 4;

/// Byte offsets of the header fields.
pub mod offset {
    /// [`super::MAGIC`], 4 bytes.
    pub const MAGIC: usize = 0;
    /// Format version, `u16` little-endian.
    pub const VERSION: usize = 4;
    /// [`super::ScalarKind`] code, 1 byte.
    pub const SCALAR: usize = 6;
    /// Reserved, 1 byte, always 0.
    pub const RESERVED: usize = 7;
    /// Model fingerprint, `u64` little-endian.
    pub const FINGERPRINT: usize = 8;
    /// Value count, `u32` little-endian.
    pub const COUNT: usize = 16;
    /// The first value.
    pub const VALUES: usize = 20;
}

/// The scalar type of a blob's values.
///
/// # Examples
///
/// ```
/// use sinew_runtime::blob::ScalarKind;
///
/// assert_eq!(ScalarKind::F64.code(), 2);
/// assert_eq!(ScalarKind::from_code(1), Some(ScalarKind::F32));
/// assert_eq!(ScalarKind::F32.bytes(), 4);
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ScalarKind {
    /// IEEE 754 binary32, 4 bytes, code 1.
    F32,
    /// IEEE 754 binary64, 8 bytes, code 2.
    F64,
}

impl ScalarKind {
    /// The byte stored at [`offset::SCALAR`].
    pub const fn code(self) -> u8 {
        match self {
            ScalarKind::F32 => 1,
            ScalarKind::F64 => 2,
        }
    }

    /// The kind of a stored code, if it is one.
    pub const fn from_code(code: u8) -> Option<ScalarKind> {
        match code {
            1 => Some(ScalarKind::F32),
            2 => Some(ScalarKind::F64),
            _ => None,
        }
    }

    /// Bytes of one value.
    pub const fn bytes(self) -> usize {
        match self {
            ScalarKind::F32 => 4,
            ScalarKind::F64 => 8,
        }
    }

    /// The Rust name of the type, `f32` or `f64`.
    pub const fn name(self) -> &'static str {
        match self {
            ScalarKind::F32 => "f32",
            ScalarKind::F64 => "f64",
        }
    }
}

/// Bytes of a blob of `count` values of `kind`: `24 + count * kind.bytes()` (saturating at
/// `usize::MAX`, which no buffer can hold).
///
/// # Examples
///
/// ```
/// use sinew_runtime::blob::{blob_bytes, ScalarKind};
///
/// assert_eq!(blob_bytes(ScalarKind::F32, 191), 24 + 191 * 4);
/// assert_eq!(blob_bytes(ScalarKind::F64, 0), 24);
/// ```
pub const fn blob_bytes(kind: ScalarKind, count: usize) -> usize {
    count
        .saturating_mul(kind.bytes())
        .saturating_add(HEADER_BYTES + CHECKSUM_BYTES)
}

/// Why a blob was refused (or could not be written).
///
/// `Display` gives a lowercase statement of fact, e.g. "the checksum is 0x1c291ca3, the bytes
/// give 0x5b0bf3f5: the blob is corrupt".
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BlobError {
    /// The first four bytes are not [`MAGIC`]: not a sinew weight blob.
    Magic {
        /// The four bytes found.
        found: [u8; 4],
    },
    /// A format version this runtime does not read.
    Version {
        /// The version in the blob.
        found: u16,
        /// [`VERSION`].
        supported: u16,
    },
    /// The reserved header byte is not zero.
    Reserved {
        /// The byte found.
        found: u8,
    },
    /// The values are of another scalar type than the model's (or the code is unknown).
    ScalarKind {
        /// The code in the blob.
        found: u8,
        /// The model's scalar type.
        expected: ScalarKind,
    },
    /// The blob was made for another model (or another shape of this one).
    Fingerprint {
        /// The fingerprint in the blob.
        found: u64,
        /// The model's `FINGERPRINT`.
        expected: u64,
    },
    /// The blob declares another number of values than the model has.
    Count {
        /// The count in the blob.
        found: u32,
        /// The model's number of values.
        expected: usize,
    },
    /// The blob is shorter or longer than a blob of this model (truncated, or with bytes after
    /// its checksum).
    Length {
        /// Bytes given.
        found: usize,
        /// Bytes of a blob of this model.
        expected: usize,
    },
    /// The stored CRC-32 does not match the bytes: the blob is corrupt.
    Checksum {
        /// The CRC-32 stored in the blob.
        stored: u32,
        /// The CRC-32 of the blob's header and values.
        computed: u32,
    },
    /// The output buffer cannot hold the blob.
    BufferTooSmall {
        /// Bytes a blob of this model needs.
        needed: usize,
        /// Bytes of the buffer.
        available: usize,
    },
    /// A writer was finished after another number of values than it declared.
    Incomplete {
        /// Values written.
        written: usize,
        /// Values declared.
        declared: usize,
    },
}

impl fmt::Display for BlobError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            BlobError::Magic { found } => write!(
                f,
                "the blob starts with {found:02x?}, not the magic bytes `SNWB`: not a sinew weight blob"
            ),
            BlobError::Version { found, supported } => write!(
                f,
                "the blob is format version {found}, this runtime reads version {supported}"
            ),
            BlobError::Reserved { found } => write!(
                f,
                "the reserved header byte is 0x{found:02x}, not 0: the blob is corrupt"
            ),
            BlobError::ScalarKind { found, expected } => match ScalarKind::from_code(found) {
                Some(kind) => write!(
                    f,
                    "the blob holds {} values, the model computes in {}",
                    kind.name(),
                    expected.name()
                ),
                None => write!(
                    f,
                    "the blob's scalar kind code is {found}, not 1 (f32) or 2 (f64)"
                ),
            },
            BlobError::Fingerprint { found, expected } => write!(
                f,
                "the blob is for model fingerprint 0x{found:016x}, this model's is 0x{expected:016x}"
            ),
            BlobError::Count { found, expected } => write!(
                f,
                "the blob declares {found} values, the model has {expected}"
            ),
            BlobError::Length { found, expected } => write!(
                f,
                "the blob is {found} bytes long, a blob of this model is {expected} bytes"
            ),
            BlobError::Checksum { stored, computed } => write!(
                f,
                "the checksum is 0x{stored:08x}, the bytes give 0x{computed:08x}: the blob is corrupt"
            ),
            BlobError::BufferTooSmall { needed, available } => write!(
                f,
                "the blob needs {needed} bytes, the buffer holds {available}"
            ),
            BlobError::Incomplete { written, declared } => write!(
                f,
                "{written} values were written to a blob that declares {declared}"
            ),
        }
    }
}

/// The CRC-32 of IEEE 802.3 (reflected polynomial `0xEDB88320`, initial value and final XOR
/// `0xFFFFFFFF`), computed four bits at a time from a 16-entry table (64 bytes of flash).
///
/// # Examples
///
/// ```
/// // The check value of this CRC over the ASCII digits "123456789" (common practice).
/// assert_eq!(sinew_runtime::blob::crc32(b"123456789"), 0xCBF4_3926);
/// assert_eq!(sinew_runtime::blob::crc32(b""), 0);
/// ```
pub fn crc32(bytes: &[u8]) -> u32 {
    let mut c = Crc32::new();
    c.update(bytes);
    c.finish()
}

/// The reflected polynomial of IEEE 802.3.
const POLY: u32 = 0xEDB8_8320;

/// `NIBBLE[i]`: the CRC register contribution of the four low bits `i`, shifted out one bit at a
/// time.
const NIBBLE: [u32; 16] = {
    let mut t = [0u32; 16];
    let mut i = 0;
    while i < 16 {
        let mut c = i as u32;
        let mut k = 0;
        while k < 4 {
            c = if c & 1 == 1 { (c >> 1) ^ POLY } else { c >> 1 };
            k += 1;
        }
        t[i] = c;
        i += 1;
    }
    t
};

/// An incremental [`crc32`]: `update` any number of times, then `finish`.
///
/// # Examples
///
/// ```
/// use sinew_runtime::blob::{crc32, Crc32};
///
/// let mut c = Crc32::new();
/// c.update(b"1234");
/// c.update(b"56789");
/// assert_eq!(c.finish(), crc32(b"123456789"));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Crc32 {
    register: u32,
}

impl Default for Crc32 {
    fn default() -> Self {
        Self::new()
    }
}

impl Crc32 {
    /// A CRC over no bytes yet.
    pub const fn new() -> Self {
        Crc32 {
            register: 0xFFFF_FFFF,
        }
    }

    /// Feeds `bytes`.
    pub fn update(&mut self, bytes: &[u8]) {
        let mut c = self.register;
        for &b in bytes {
            c ^= u32::from(b);
            c = (c >> 4) ^ nibble(c);
            c = (c >> 4) ^ nibble(c);
        }
        self.register = c;
    }

    /// The CRC-32 of every byte fed.
    pub const fn finish(self) -> u32 {
        self.register ^ 0xFFFF_FFFF
    }
}

#[inline]
fn nibble(c: u32) -> u32 {
    // The index is below 16, so `get` always succeeds; it keeps the lookup free of a panic path.
    NIBBLE.get((c & 0xF) as usize).copied().unwrap_or(0)
}

/// A scalar type a blob can hold: `f32` or `f64`, stored little-endian.
pub trait BlobScalar: Copy {
    /// The kind stored in the header.
    const KIND: ScalarKind;
    /// Writes the little-endian bytes of `self` into the start of `out` (as many as fit).
    fn write_le(self, out: &mut [u8]);
    /// Reads a value from the little-endian bytes at the start of `bytes` (missing bytes read as
    /// zero).
    fn read_le(bytes: &[u8]) -> Self;
}

macro_rules! blob_scalar {
    ($t:ty, $kind:expr, $n:expr) => {
        impl BlobScalar for $t {
            const KIND: ScalarKind = $kind;
            #[inline]
            fn write_le(self, out: &mut [u8]) {
                for (o, b) in out.iter_mut().zip(self.to_le_bytes()) {
                    *o = b;
                }
            }
            #[inline]
            fn read_le(bytes: &[u8]) -> Self {
                <$t>::from_le_bytes(array::<$n>(bytes))
            }
        }
    };
}

blob_scalar!(f32, ScalarKind::F32, 4);
blob_scalar!(f64, ScalarKind::F64, 8);

/// The first `N` bytes of `bytes` as an array (zero-filled past the end).
#[inline]
fn array<const N: usize>(bytes: &[u8]) -> [u8; N] {
    let mut a = [0u8; N];
    for (d, s) in a.iter_mut().zip(bytes) {
        *d = *s;
    }
    a
}

/// The `N` bytes at `at` (zero-filled past the end of `bytes`).
#[inline]
fn field<const N: usize>(bytes: &[u8], at: usize) -> [u8; N] {
    array::<N>(bytes.get(at..).unwrap_or(&[]))
}

/// The header fields of a blob, as stored.
///
/// # Examples
///
/// ```
/// use sinew_runtime::blob::{blob_bytes, Header, ScalarKind, Writer};
///
/// let mut buf = [0u8; blob_bytes(ScalarKind::F64, 1)];
/// let mut w = Writer::<f64>::new(&mut buf, 42, 1).unwrap();
/// w.write(&[3.0]);
/// w.finish().unwrap();
/// let h = Header::parse(&buf).unwrap();
/// assert_eq!((h.kind, h.fingerprint, h.count), (ScalarKind::F64, 42, 1));
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Header {
    /// The values' scalar type.
    pub kind: ScalarKind,
    /// The fingerprint of the model the blob was made for.
    pub fingerprint: u64,
    /// The number of values.
    pub count: u32,
}

impl Header {
    /// Reads and checks the model-independent part of a header: enough bytes for a header and a
    /// checksum, the magic, the version, the reserved byte and a known scalar kind. The length
    /// and checksum are checked by [`Values::open`].
    pub fn parse(bytes: &[u8]) -> Result<Header, BlobError> {
        // Without a known model the shortest blob is one of zero values.
        let shortest = HEADER_BYTES + CHECKSUM_BYTES;
        if bytes.len() < shortest {
            return Err(BlobError::Length {
                found: bytes.len(),
                expected: shortest,
            });
        }
        let magic = field::<4>(bytes, offset::MAGIC);
        if magic != MAGIC {
            return Err(BlobError::Magic { found: magic });
        }
        let version = u16::from_le_bytes(field::<2>(bytes, offset::VERSION));
        if version != VERSION {
            return Err(BlobError::Version {
                found: version,
                supported: VERSION,
            });
        }
        let [reserved] = field::<1>(bytes, offset::RESERVED);
        if reserved != 0 {
            return Err(BlobError::Reserved { found: reserved });
        }
        let [code] = field::<1>(bytes, offset::SCALAR);
        let Some(kind) = ScalarKind::from_code(code) else {
            return Err(BlobError::ScalarKind {
                found: code,
                // Unknown codes are refused whatever the model; `expected` is filled in by
                // `Values::open`, which knows the model's kind.
                expected: ScalarKind::F32,
            });
        };
        Ok(Header {
            kind,
            fingerprint: u64::from_le_bytes(field::<8>(bytes, offset::FINGERPRINT)),
            count: u32::from_le_bytes(field::<4>(bytes, offset::COUNT)),
        })
    }
}

/// The values of a blob that passed every check, read in order.
///
/// # Examples
///
/// ```
/// use sinew_runtime::blob::{blob_bytes, ScalarKind, Values, Writer};
///
/// let mut buf = [0u8; blob_bytes(ScalarKind::F32, 3)];
/// let mut w = Writer::<f32>::new(&mut buf, 9, 3).unwrap();
/// w.write(&[1.0, 2.0]);
/// w.write(&[3.0]);
/// w.finish().unwrap();
///
/// let mut v = Values::<f32>::open(&buf, 9, 3).unwrap();
/// let (mut a, mut b) = ([0.0f32; 2], [0.0f32; 1]);
/// v.read_into(&mut a);
/// v.read_into(&mut b);
/// assert_eq!((a, b, v.remaining()), ([1.0, 2.0], [3.0], 0));
/// ```
#[derive(Clone, Debug)]
pub struct Values<'a, T> {
    rest: &'a [u8],
    scalar: PhantomData<T>,
}

impl<'a, T: BlobScalar> Values<'a, T> {
    /// Checks `bytes` as a blob of `count` values of `T` for the model with `fingerprint` (see
    /// the [module documentation](self) for the order of the checks) and returns its values.
    pub fn open(bytes: &'a [u8], fingerprint: u64, count: usize) -> Result<Self, BlobError> {
        let expected_len = blob_bytes(T::KIND, count);
        let header = Header::parse(bytes).map_err(|e| match e {
            BlobError::Length { found, .. } => BlobError::Length {
                found,
                expected: expected_len,
            },
            BlobError::ScalarKind { found, .. } => BlobError::ScalarKind {
                found,
                expected: T::KIND,
            },
            other => other,
        })?;
        if header.kind != T::KIND {
            return Err(BlobError::ScalarKind {
                found: header.kind.code(),
                expected: T::KIND,
            });
        }
        if header.fingerprint != fingerprint {
            return Err(BlobError::Fingerprint {
                found: header.fingerprint,
                expected: fingerprint,
            });
        }
        if usize::try_from(header.count).ok() != Some(count) {
            return Err(BlobError::Count {
                found: header.count,
                expected: count,
            });
        }
        if bytes.len() != expected_len {
            return Err(BlobError::Length {
                found: bytes.len(),
                expected: expected_len,
            });
        }
        let body_len = expected_len - CHECKSUM_BYTES;
        let (Some(body), Some(stored)) = (bytes.get(..body_len), bytes.get(body_len..)) else {
            // Unreachable: the length was checked above.
            return Err(BlobError::Length {
                found: bytes.len(),
                expected: expected_len,
            });
        };
        let stored = u32::from_le_bytes(array::<4>(stored));
        let computed = crc32(body);
        if stored != computed {
            return Err(BlobError::Checksum { stored, computed });
        }
        Ok(Values {
            rest: body.get(HEADER_BYTES..).unwrap_or(&[]),
            scalar: PhantomData,
        })
    }

    /// Fills `dst` with the next `dst.len()` values (fewer if the blob has fewer left; the rest
    /// of `dst` is left as it is). Returns how many were read.
    pub fn read_into(&mut self, dst: &mut [T]) -> usize {
        let size = T::KIND.bytes();
        let mut n = 0;
        for (d, chunk) in dst.iter_mut().zip(crate::each::pieces(self.rest, size)) {
            *d = T::read_le(chunk);
            n += 1;
        }
        self.rest = self.rest.get(n * size..).unwrap_or(&[]);
        n
    }

    /// Values not read yet.
    pub fn remaining(&self) -> usize {
        self.rest.len() / T::KIND.bytes()
    }
}

/// Writes a blob into a caller's buffer: header first, then [`Writer::write`] the values in
/// order, then [`Writer::finish`] adds the checksum.
///
/// See the [module documentation](self) for an example.
#[derive(Debug)]
pub struct Writer<'a, T> {
    body: &'a mut [u8],
    crc_out: &'a mut [u8],
    written: usize,
    declared: usize,
    scalar: PhantomData<T>,
}

impl<'a, T: BlobScalar> Writer<'a, T> {
    /// Starts a blob of `count` values of `T` for the model with `fingerprint` in the start of
    /// `out`, writing its header.
    ///
    /// Fails with [`BlobError::BufferTooSmall`] when `out` is shorter than
    /// [`blob_bytes`]`(T::KIND, count)`, and with [`BlobError::Count`] when `count` does not fit
    /// the 32-bit count field.
    pub fn new(out: &'a mut [u8], fingerprint: u64, count: usize) -> Result<Self, BlobError> {
        let needed = blob_bytes(T::KIND, count);
        let Ok(count32) = u32::try_from(count) else {
            return Err(BlobError::Count {
                found: u32::MAX,
                expected: count,
            });
        };
        let available = out.len();
        let body_len = needed - CHECKSUM_BYTES;
        let Some(blob) = out.get_mut(..needed) else {
            return Err(BlobError::BufferTooSmall { needed, available });
        };
        let Some((body, crc_out)) = blob.split_at_mut_checked(body_len) else {
            return Err(BlobError::BufferTooSmall { needed, available });
        };
        let header = body.get_mut(..HEADER_BYTES).unwrap_or(&mut []);
        let mut h = [0u8; HEADER_BYTES];
        let parts: [(usize, &[u8]); 6] = [
            (offset::MAGIC, &MAGIC),
            (offset::VERSION, &VERSION.to_le_bytes()),
            (offset::SCALAR, &[T::KIND.code()]),
            (offset::RESERVED, &[0]),
            (offset::FINGERPRINT, &fingerprint.to_le_bytes()),
            (offset::COUNT, &count32.to_le_bytes()),
        ];
        for (at, bytes) in parts {
            for (d, s) in h.iter_mut().skip(at).zip(bytes) {
                *d = *s;
            }
        }
        for (d, s) in header.iter_mut().zip(h) {
            *d = s;
        }
        Ok(Writer {
            body,
            crc_out,
            written: 0,
            declared: count,
            scalar: PhantomData,
        })
    }

    /// Appends `values` (those beyond the declared count are dropped and make
    /// [`Writer::finish`] fail).
    pub fn write(&mut self, values: &[T]) {
        let size = T::KIND.bytes();
        let start = HEADER_BYTES.saturating_add(self.written.saturating_mul(size));
        let room = self.body.get_mut(start..).unwrap_or(&mut []);
        for (chunk, v) in crate::each::pieces_mut(room, size).zip(values) {
            v.write_le(chunk);
        }
        self.written = self.written.saturating_add(values.len());
    }

    /// Adds the checksum and returns the blob's length in bytes, or [`BlobError::Incomplete`]
    /// when another number of values than declared was written (the buffer then holds no valid
    /// blob: its checksum is not written).
    pub fn finish(self) -> Result<usize, BlobError> {
        if self.written != self.declared {
            return Err(BlobError::Incomplete {
                written: self.written,
                declared: self.declared,
            });
        }
        let crc = crc32(self.body);
        for (d, s) in self.crc_out.iter_mut().zip(crc.to_le_bytes()) {
            *d = s;
        }
        Ok(self.body.len() + self.crc_out.len())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn blob_f32(values: &[f32], fingerprint: u64) -> std::vec::Vec<u8> {
        let mut buf = std::vec![0u8; blob_bytes(ScalarKind::F32, values.len())];
        let mut w = Writer::<f32>::new(&mut buf, fingerprint, values.len()).unwrap();
        w.write(values);
        w.finish().unwrap();
        buf
    }

    #[test]
    fn crc32_check_values() {
        // The check value of CRC-32/IEEE 802.3 over "123456789" (common practice).
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
        // CRC-32 of one zero byte and of "a" (from memory).
        assert_eq!(crc32(&[0]), 0xD202_EF8D);
        assert_eq!(crc32(b"a"), 0xE8B7_BE43);
        // Entry 1 of the nibble table is what a register holding 1 becomes after four shifts of
        // the bitwise definition.
        let mut c = 1u32;
        for _ in 0..4 {
            c = if c & 1 == 1 { (c >> 1) ^ POLY } else { c >> 1 };
        }
        assert_eq!(NIBBLE[1], c);
    }

    #[test]
    fn crc32_matches_the_bitwise_definition() {
        fn bitwise(bytes: &[u8]) -> u32 {
            let mut c = 0xFFFF_FFFFu32;
            for &b in bytes {
                c ^= u32::from(b);
                for _ in 0..8 {
                    c = if c & 1 == 1 { (c >> 1) ^ POLY } else { c >> 1 };
                }
            }
            !c
        }
        let data: std::vec::Vec<u8> = (0..300u32).map(|i| (i * 37 + 11) as u8).collect();
        for n in 0..data.len() {
            assert_eq!(crc32(&data[..n]), bitwise(&data[..n]), "{n}");
        }
    }

    #[test]
    fn the_layout_is_as_documented() {
        let b = blob_f32(&[1.0, -2.0], 0x1122_3344_5566_7788);
        assert_eq!(b.len(), 32);
        assert_eq!(&b[0..4], b"SNWB");
        assert_eq!(&b[4..6], &[1, 0]);
        assert_eq!(b[6], 1);
        assert_eq!(b[7], 0);
        assert_eq!(&b[8..16], &[0x88, 0x77, 0x66, 0x55, 0x44, 0x33, 0x22, 0x11]);
        assert_eq!(&b[16..20], &[2, 0, 0, 0]);
        // 1.0f32 = 0x3f800000, -2.0f32 = 0xc0000000, little-endian (IEEE 754).
        assert_eq!(&b[20..24], &[0, 0, 0x80, 0x3f]);
        assert_eq!(&b[24..28], &[0, 0, 0, 0xc0]);
        assert_eq!(
            u32::from_le_bytes([b[28], b[29], b[30], b[31]]),
            crc32(&b[..28])
        );
    }

    #[test]
    fn every_check_names_its_field() {
        let good = blob_f32(&[0.5; 3], 5);
        assert!(Values::<f32>::open(&good, 5, 3).is_ok());
        let with = |at: usize, v: u8| {
            let mut b = good.clone();
            b[at] = v;
            b
        };
        assert!(matches!(
            Values::<f32>::open(&with(0, b'X'), 5, 3),
            Err(BlobError::Magic { .. })
        ));
        assert_eq!(
            Values::<f32>::open(&with(4, 2), 5, 3).unwrap_err(),
            BlobError::Version {
                found: 2,
                supported: 1
            }
        );
        assert_eq!(
            Values::<f32>::open(&with(7, 1), 5, 3).unwrap_err(),
            BlobError::Reserved { found: 1 }
        );
        assert_eq!(
            Values::<f32>::open(&with(6, 2), 5, 3).unwrap_err(),
            BlobError::ScalarKind {
                found: 2,
                expected: ScalarKind::F32
            }
        );
        assert_eq!(
            Values::<f32>::open(&with(6, 9), 5, 3).unwrap_err(),
            BlobError::ScalarKind {
                found: 9,
                expected: ScalarKind::F32
            }
        );
        assert_eq!(
            Values::<f32>::open(&good, 6, 3).unwrap_err(),
            BlobError::Fingerprint {
                found: 5,
                expected: 6
            }
        );
        assert_eq!(
            Values::<f32>::open(&good, 5, 4).unwrap_err(),
            BlobError::Count {
                found: 3,
                expected: 4
            }
        );
        assert_eq!(
            Values::<f64>::open(&good, 5, 3).unwrap_err(),
            BlobError::ScalarKind {
                found: 1,
                expected: ScalarKind::F64
            }
        );
        assert_eq!(
            Values::<f32>::open(&good[..good.len() - 1], 5, 3).unwrap_err(),
            BlobError::Length {
                found: 35,
                expected: 36
            }
        );
        assert_eq!(
            Values::<f32>::open(&good[..3], 5, 3).unwrap_err(),
            BlobError::Length {
                found: 3,
                expected: 36
            }
        );
        let mut long = good.clone();
        long.push(0);
        assert_eq!(
            Values::<f32>::open(&long, 5, 3).unwrap_err(),
            BlobError::Length {
                found: 37,
                expected: 36
            }
        );
        assert!(matches!(
            Values::<f32>::open(&with(21, good[21] ^ 1), 5, 3),
            Err(BlobError::Checksum { .. })
        ));
    }

    #[test]
    fn f64_values_round_trip_bitwise() {
        let vals = [-0.0, 1e-310, f64::MAX, -f64::MIN_POSITIVE, 0.1];
        let mut buf = [0u8; blob_bytes(ScalarKind::F64, 5)];
        let mut w = Writer::<f64>::new(&mut buf, 1, 5).unwrap();
        w.write(&vals[..2]);
        w.write(&vals[2..]);
        assert_eq!(w.finish(), Ok(64));
        let mut v = Values::<f64>::open(&buf, 1, 5).unwrap();
        let mut back = [0.0f64; 6];
        assert_eq!(v.read_into(&mut back), 5);
        for (a, b) in vals.iter().zip(&back) {
            assert_eq!(a.to_bits(), b.to_bits());
        }
        assert_eq!(back[5], 0.0, "the surplus is left as it was");
        assert_eq!(v.remaining(), 0);
    }

    #[test]
    fn the_writer_refuses_short_buffers_and_wrong_counts() {
        let mut small = [0u8; 31];
        assert_eq!(
            Writer::<f32>::new(&mut small, 0, 2).unwrap_err(),
            BlobError::BufferTooSmall {
                needed: 32,
                available: 31
            }
        );
        let mut buf = [0u8; 40];
        let mut w = Writer::<f32>::new(&mut buf, 0, 2).unwrap();
        w.write(&[1.0]);
        assert_eq!(
            w.finish().unwrap_err(),
            BlobError::Incomplete {
                written: 1,
                declared: 2
            }
        );
        let mut w = Writer::<f32>::new(&mut buf, 0, 2).unwrap();
        w.write(&[1.0, 2.0, 3.0]);
        assert_eq!(
            w.finish().unwrap_err(),
            BlobError::Incomplete {
                written: 3,
                declared: 2
            }
        );
        // A larger buffer is fine; the blob takes its start and the length is returned.
        let mut w = Writer::<f32>::new(&mut buf, 0, 2).unwrap();
        w.write(&[1.0, 2.0]);
        assert_eq!(w.finish(), Ok(32));
        assert!(Values::<f32>::open(&buf[..32], 0, 2).is_ok());
    }

    #[test]
    fn messages_state_the_fact() {
        let text = |e: BlobError| std::format!("{e}");
        assert_eq!(
            text(BlobError::Checksum {
                stored: 1,
                computed: 2
            }),
            "the checksum is 0x00000001, the bytes give 0x00000002: the blob is corrupt"
        );
        assert_eq!(
            text(BlobError::ScalarKind {
                found: 2,
                expected: ScalarKind::F32
            }),
            "the blob holds f64 values, the model computes in f32"
        );
        assert_eq!(
            text(BlobError::Magic { found: *b"PK\x03\x04" }),
            "the blob starts with [50, 4b, 03, 04], not the magic bytes `SNWB`: not a sinew weight blob"
        );
        assert_eq!(
            text(BlobError::Length {
                found: 3,
                expected: 36
            }),
            "the blob is 3 bytes long, a blob of this model is 36 bytes"
        );
    }
}

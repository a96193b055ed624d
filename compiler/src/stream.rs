//! The one bounded reader of data input: a file, a pipe or standard input (`-`), plain or gzip,
//! read exactly once, with its fingerprint computed on the same pass.
//!
//! [`open`] gives a [`Stream`]. Its bytes are the decompressed text when the input starts with
//! the gzip magic bytes `1f 8b` (whatever its name, so `--data <(cat data.csv.gz)` works too),
//! the input's bytes otherwise. Three limits hold, each an error as soon as it is reached, never a
//! hang on an endless input:
//!
//! - at most [`Limits::total`] bytes of text ([`MAX_DATA_BYTES`] by default);
//! - for gzip input, once past [`Limits::ratio_after`] bytes of text, at most
//!   [`Limits::ratio`] bytes of text per compressed byte ([`MAX_GZIP_RATIO`]): a decompression
//!   bomb is refused after reading a few mebibytes of it;
//! - the CSV reader's own record limit ([`crate::data::MAX_RECORD_BYTES`]), which stops a stream
//!   with no line ends (such as `/dev/zero`) after 1 MiB.
//!
//! [`Stream::fingerprint`] is the 64-bit FNV-1a hash ([`crate::weights::data_hash`]) of the text
//! bytes read so far: of the decompressed text for gzip input, so a file and its `.gz` form, a
//! pipe and standard input all give the same fingerprint for the same text.

use flate2::read::MultiGzDecoder;
use std::cell::Cell;
use std::fmt;
use std::fs::File;
use std::io::{self, BufRead, BufReader, Read};
use std::path::Path;
use std::rc::Rc;

/// The most text one data input may hold: 4 GiB, after decompression.
pub const MAX_DATA_BYTES: u64 = 4 << 30;

/// The largest ratio of text bytes to compressed bytes accepted from gzip input, past
/// [`RATIO_GRACE_BYTES`] of text. Comma-separated numbers compress about 3 to 20 times (common
/// practice for deflate on text); a ratio above 200 means a crafted or degenerate stream.
pub const MAX_GZIP_RATIO: u64 = 200;

/// Text bytes read before [`MAX_GZIP_RATIO`] applies: 16 MiB, so that a small, highly repetitive
/// file is never refused.
pub const RATIO_GRACE_BYTES: u64 = 16 << 20;

/// The name of standard input in messages, for the path `-`.
pub const STDIN_NAME: &str = "<stdin>";

/// The limits of one [`Stream`]. [`Limits::default`] holds the documented constants; tests
/// lower them.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    /// Most text bytes.
    pub total: u64,
    /// Most text bytes per compressed byte, for gzip input.
    pub ratio: u64,
    /// Text bytes read before `ratio` applies.
    pub ratio_after: u64,
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            total: MAX_DATA_BYTES,
            ratio: MAX_GZIP_RATIO,
            ratio_after: RATIO_GRACE_BYTES,
        }
    }
}

/// Why a stream stopped before its end. Carried inside the [`io::Error`] the reader returns, so
/// that a consumer such as the CSV reader passes it through; [`LimitError::of`] finds it again.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LimitError {
    /// More than `limit` bytes of text.
    TooLarge {
        /// The limit.
        limit: u64,
    },
    /// Gzip input expanding more than `ratio` times.
    Bomb {
        /// Text bytes read.
        text: u64,
        /// Compressed bytes read.
        compressed: u64,
        /// The limit on their ratio.
        ratio: u64,
    },
    /// Gzip input that is not a valid gzip stream.
    BadGzip(String),
}

impl LimitError {
    /// The limit error inside `e`, if `e` is one.
    pub fn of(e: &io::Error) -> Option<&LimitError> {
        e.get_ref().and_then(|inner| inner.downcast_ref())
    }
}

impl fmt::Display for LimitError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            LimitError::TooLarge { limit } => {
                write!(f, "the data holds more than {limit} bytes of text")
            }
            LimitError::Bomb {
                text,
                compressed,
                ratio,
            } => write!(
                f,
                "the gzip data expands more than {ratio} times ({text} bytes of text from \
                 {compressed} compressed bytes): refused as a decompression bomb"
            ),
            LimitError::BadGzip(e) => write!(f, "the data is not a valid gzip stream: {e}"),
        }
    }
}

impl std::error::Error for LimitError {}

/// Counts the bytes read through it into a shared cell.
struct Counted<R> {
    inner: R,
    count: Rc<Cell<u64>>,
}

impl<R: Read> Read for Counted<R> {
    fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
        let n = self.inner.read(buf)?;
        self.count.set(self.count.get() + n as u64);
        Ok(n)
    }
}

/// The source: plain bytes, or gzip decompressed.
enum Body {
    Plain(Box<dyn BufRead>),
    Gzip(Box<MultiGzDecoder<Counted<Box<dyn BufRead>>>>),
}

/// An opened data input (see the [module documentation](self)).
pub struct Stream {
    name: String,
    body: Body,
    compressed: Rc<Cell<u64>>,
    text: u64,
    hash: u64,
    limits: Limits,
}

impl Stream {
    /// Wraps `reader` named `name` (for messages), detecting gzip by its first two bytes.
    pub fn new(name: &str, mut reader: Box<dyn Read>, limits: Limits) -> io::Result<Stream> {
        // The first two bytes decide; a pipe may deliver them in separate reads.
        let mut head = [0u8; 2];
        let mut got = 0;
        while got < head.len() {
            match reader.read(&mut head[got..]) {
                Ok(0) => break,
                Ok(n) => got += n,
                Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                Err(e) => return Err(e),
            }
        }
        let gzip = head[..got] == [0x1f, 0x8b];
        let whole = io::Cursor::new(head[..got].to_vec()).chain(reader);
        let buffered: Box<dyn BufRead> = Box::new(BufReader::with_capacity(1 << 16, whole));
        let compressed = Rc::new(Cell::new(0));
        let body = if gzip {
            Body::Gzip(Box::new(MultiGzDecoder::new(Counted {
                inner: buffered,
                count: compressed.clone(),
            })))
        } else {
            Body::Plain(buffered)
        };
        Ok(Stream {
            name: name.to_string(),
            body,
            compressed,
            text: 0,
            hash: crate::ir::FNV1A64_OFFSET,
            limits,
        })
    }

    /// The input's name in messages: its path, or [`STDIN_NAME`].
    pub fn name(&self) -> &str {
        &self.name
    }

    /// True when the input is gzip.
    pub fn is_gzip(&self) -> bool {
        matches!(self.body, Body::Gzip(_))
    }

    /// [`crate::weights::data_hash`] of the text read so far: of all of it once the stream has
    /// been read to its end.
    pub fn fingerprint(&self) -> String {
        format!("{:016x}", self.hash)
    }

    fn refuse(e: LimitError) -> io::Error {
        io::Error::new(io::ErrorKind::InvalidData, e)
    }
}

impl Read for Stream {
    fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
        // Never read past the total limit: ask for at most one byte more than is left, so that
        // the byte that crosses it is seen and refused.
        let left = self
            .limits
            .total
            .saturating_sub(self.text)
            .saturating_add(1);
        let want = usize::try_from(left).map_or(buf.len(), |l| l.min(buf.len()));
        let n = match &mut self.body {
            Body::Plain(r) => r.read(&mut buf[..want])?,
            Body::Gzip(r) => r.read(&mut buf[..want]).map_err(|e| {
                if e.kind() == io::ErrorKind::Interrupted {
                    e
                } else {
                    Stream::refuse(LimitError::BadGzip(e.to_string()))
                }
            })?,
        };
        self.text += n as u64;
        if self.text > self.limits.total {
            return Err(Stream::refuse(LimitError::TooLarge {
                limit: self.limits.total,
            }));
        }
        if self.is_gzip() && self.text > self.limits.ratio_after {
            let compressed = self.compressed.get().max(1);
            if self.text / compressed > self.limits.ratio {
                return Err(Stream::refuse(LimitError::Bomb {
                    text: self.text,
                    compressed,
                    ratio: self.limits.ratio,
                }));
            }
        }
        self.hash = crate::ir::fnv1a64_extend(self.hash, &buf[..n]);
        Ok(n)
    }
}

/// Opens the data input at `path`: standard input for `-`, the file otherwise.
pub fn open(path: &Path, limits: Limits) -> io::Result<Stream> {
    if path == Path::new("-") {
        Stream::new(STDIN_NAME, Box::new(io::stdin()), limits)
    } else {
        let file = File::open(path)?;
        Stream::new(&path.display().to_string(), Box::new(file), limits)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use flate2::write::GzEncoder;
    use flate2::Compression;
    use std::io::Write;

    fn gzip(bytes: &[u8]) -> Vec<u8> {
        let mut e = GzEncoder::new(Vec::new(), Compression::fast());
        e.write_all(bytes).unwrap();
        e.finish().unwrap()
    }

    fn read_all(bytes: Vec<u8>, limits: Limits) -> (io::Result<Vec<u8>>, String) {
        let mut s = Stream::new("t", Box::new(io::Cursor::new(bytes)), limits).unwrap();
        let mut out = Vec::new();
        let r = s.read_to_end(&mut out).map(|_| out);
        (r, s.fingerprint())
    }

    #[test]
    fn plain_and_gzip_give_the_same_text_and_fingerprint() {
        let text = b"a,b,label\n0,1,open\n1,1,shut\n".repeat(10_000);
        let (plain, fp1) = read_all(text.clone(), Limits::default());
        let (unzipped, fp2) = read_all(gzip(&text), Limits::default());
        assert_eq!(plain.unwrap(), text);
        assert_eq!(unzipped.unwrap(), text);
        assert_eq!(fp1, fp2);
        assert_eq!(fp1, crate::weights::data_hash(&text));
    }

    #[test]
    fn concatenated_gzip_members_are_one_stream() {
        let mut two = gzip(b"a,b\n");
        two.extend(gzip(b"1,2\n"));
        assert_eq!(read_all(two, Limits::default()).0.unwrap(), b"a,b\n1,2\n");
    }

    #[test]
    fn the_total_limit_is_exact() {
        let limits = Limits {
            total: 10,
            ..Limits::default()
        };
        assert!(read_all(vec![b'x'; 10], limits).0.is_ok());
        let e = read_all(vec![b'x'; 11], limits).0.unwrap_err();
        assert_eq!(
            LimitError::of(&e),
            Some(&LimitError::TooLarge { limit: 10 })
        );
    }

    #[test]
    fn a_bomb_is_refused_past_the_grace() {
        let limits = Limits {
            ratio_after: 1 << 16,
            ..Limits::default()
        };
        let e = read_all(gzip(&vec![b'0'; 1 << 22]), limits).0.unwrap_err();
        assert!(
            matches!(LimitError::of(&e), Some(LimitError::Bomb { .. })),
            "{e}"
        );
    }

    #[test]
    fn a_corrupt_gzip_stream_is_an_error_not_text() {
        let mut bytes = gzip(b"a,b\n1,2\n");
        let n = bytes.len();
        bytes.truncate(n - 6);
        let e = read_all(bytes, Limits::default()).0.unwrap_err();
        assert!(
            matches!(LimitError::of(&e), Some(LimitError::BadGzip(_))),
            "{e}"
        );
    }
}

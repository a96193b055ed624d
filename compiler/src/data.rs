//! Training data: CSV files read for a model, the train/validation split, and the statistics for
//! `standardize`.
//!
//! # The CSV layout
//!
//! The first line is a header; every other non-empty line is one sample. Cells are trimmed of
//! surrounding spaces and may be quoted. The input columns come first, exactly as many as the
//! model's input width, followed by either
//!
//! - **one column per output unit**, holding the target values (for a cross-entropy output they
//!   must lie in `[0, 1]`), or
//! - **one `label` column** (its header is exactly `label`), for a classifier (a cross-entropy
//!   model) only. A label is a class name from the spec's `classes` or a 0-based class index.
//!   For a one-unit sigmoid output the two classes are 0 and 1 and the target is `0.0` or `1.0`;
//!   for a wider output the target is the one-hot row of the class.
//!
//! When the output has one unit and the last header is `label`, a classifier reads it as labels
//! and any other model reads it as the target value. The header names the input features
//! ([`Dataset::input_names`]); output column names are not checked.
//!
//! # Errors
//!
//! Every error is a [`DataError`] that displays as `FILE:LINE: error[Dnn]: message`, with a
//! `help:` line where there is a fix to suggest:
//!
//! | code | meaning |
//! | --- | --- |
//! | `D01` | the file cannot be read |
//! | `D02` | the file is empty (no header) |
//! | `D03` | the file has a header but no samples |
//! | `D04` | the header's column count fits neither layout |
//! | `D05` | a line's field count differs from the layout the header set |
//! | `D06` | a cell is not a number (or is empty) |
//! | `D07` | a cell is NaN or infinite |
//! | `D08` | a label is not a known class |
//! | `D09` | a class index is out of range |
//! | `D10` | a `label` column for a model that does not classify |
//! | `D11` | a single record is larger than [`MAX_RECORD_BYTES`] |
//! | `D12` | the file is not UTF-8 text |
//! | `D13` | a cross-entropy target is outside `[0, 1]` |
//! | `D14` | the data passes a limit of [`crate::stream`] (size, or a gzip bomb) |
//! | `D15` | data that starts like gzip is not a valid gzip stream |
//! | `D16` | the first line holds numbers: the file has no header |
//!
//! # Examples
//! ```
//! use sinew::data::read_csv_str;
//! let spec = "model valve_gate\nscalar f64\ninput switches 2\nlayer hidden 3 tanh\n\
//!             output open 1 sigmoid classes shut, open\nloss cross_entropy\n";
//! let model = sinew::check_source(spec).model.expect("a valid spec");
//! let ds = read_csv_str("gate.csv", "a,b,label\n0,1,open\n1,1,0\n", &model).unwrap();
//! assert_eq!(ds.targets, vec![vec![1.0], vec![0.0]]);
//! assert_eq!(ds.labels, Some(vec![1, 0]));
//!
//! let err = read_csv_str("gate.csv", "a,b,label\n0,x,open\n", &model).unwrap_err();
//! assert_eq!(err.to_string(), "gate.csv:2: error[D06]: cell `x` in column 2 (`b`) is not a number");
//! ```

use crate::code::Code;
use crate::ir::Model;
use crate::stream::{self, LimitError, Limits, Stream};
use crate::text::quote;
use sinew_runtime::rng::SplitMix64;
use std::cell::RefCell;
use std::fmt;
use std::io::{self, Read};
use std::path::Path;
use std::rc::Rc;

/// The largest single CSV record [`read_csv`] accepts, in bytes (1 MiB). A longer record, such
/// as a file with a stray opening quote, is refused (`D11`) without being read into memory.
pub const MAX_RECORD_BYTES: u64 = 1 << 20;

/// Samples read for one model, stored as `f64`.
#[derive(Debug, Clone, PartialEq)]
pub struct Dataset {
    /// One row per sample, `input.width` values each.
    pub inputs: Vec<Vec<f64>>,
    /// One row per sample, one value per output unit.
    pub targets: Vec<Vec<f64>>,
    /// The class index of every sample, for a classifier: from a `label` column, or derived when
    /// every target row is a class (a one-hot row, or 0/1 for a one-unit output).
    pub labels: Option<Vec<usize>>,
    /// The header names of the input columns.
    pub input_names: Vec<String>,
}

impl Dataset {
    /// Number of samples.
    pub fn len(&self) -> usize {
        self.inputs.len()
    }

    /// True when there are no samples.
    pub fn is_empty(&self) -> bool {
        self.inputs.is_empty()
    }

    /// The samples at `indices` (skipping any out of range), in that order.
    fn subset(&self, indices: &[usize]) -> Dataset {
        let pick = |rows: &[Vec<f64>]| -> Vec<Vec<f64>> {
            indices
                .iter()
                .filter_map(|&i| rows.get(i).cloned())
                .collect()
        };
        Dataset {
            inputs: pick(&self.inputs),
            targets: pick(&self.targets),
            labels: self
                .labels
                .as_ref()
                .map(|l| indices.iter().filter_map(|&i| l.get(i).copied()).collect()),
            input_names: self.input_names.clone(),
        }
    }
}

/// A data file that cannot be used for a model.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DataError {
    /// Stable code (`D01`...; see the [module documentation](self)).
    pub code: Code,
    /// The file's name as given.
    pub file: String,
    /// 1-based line where the problem is, when it has one.
    pub line: Option<u64>,
    /// Lowercase statement of fact.
    pub message: String,
    /// How to fix it.
    pub help: Option<String>,
}

impl DataError {
    fn new(code: Code, file: &str, line: Option<u64>, message: impl Into<String>) -> Self {
        DataError {
            code,
            file: file.to_string(),
            line,
            message: message.into(),
            help: None,
        }
    }

    fn help(mut self, help: impl Into<String>) -> Self {
        self.help = Some(help.into());
        self
    }
}

impl fmt::Display for DataError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(line) = self.line {
            write!(f, ":{line}")?;
        }
        write!(f, ": error[{}]: {}", self.code, self.message)?;
        if let Some(help) = &self.help {
            write!(f, "\n  help: {help}")?;
        }
        Ok(())
    }
}

impl std::error::Error for DataError {}

/// Reads the CSV file at `path` for `model` (layout in the [module documentation](self)).
///
/// The file is streamed: no more than about [`MAX_RECORD_BYTES`] of it is held beyond the
/// samples already parsed, and a longer record is refused (`D11`).
///
/// `path` `-` is standard input; input that starts with the gzip bytes is decompressed; the
/// limits of [`crate::stream`] apply (`D14`, `D15`).
pub fn read_csv(path: &Path, model: &Model) -> Result<Dataset, DataError> {
    read_csv_hashed(path, model).map(|(ds, _)| ds)
}

/// [`read_csv`], and the fingerprint ([`crate::weights::data_hash`]) of the text read, from the
/// same single pass over the input.
pub fn read_csv_hashed(path: &Path, model: &Model) -> Result<(Dataset, String), DataError> {
    read_stream(path, model, Limits::default())
}

/// [`read_csv_hashed`] under explicit stream limits.
pub fn read_stream(
    path: &Path,
    model: &Model,
    limits: Limits,
) -> Result<(Dataset, String), DataError> {
    let stream = stream::open(path, limits).map_err(|e| {
        DataError::new(
            Code::D01,
            &path.display().to_string(),
            None,
            format!("cannot read the data file: {e}"),
        )
    })?;
    read_hashed(stream, model)
}

/// Reads CSV from an opened [`Stream`], returning the data set and the stream's fingerprint.
pub fn read_hashed(mut stream: Stream, model: &Model) -> Result<(Dataset, String), DataError> {
    let name = stream.name().to_string();
    let ds = read_from(&name, &mut stream, model, MAX_RECORD_BYTES)?;
    // The CSV reader stops at the end of the input; the fingerprint covers all of it.
    Ok((ds, stream.fingerprint()))
}

/// Reads CSV text for `model` exactly as [`read_csv`] reads a file; `name` names it in errors.
pub fn read_csv_str(name: &str, text: &str, model: &Model) -> Result<Dataset, DataError> {
    read_from(name, text.as_bytes(), model, MAX_RECORD_BYTES)
}

/// Which columns follow the inputs.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Layout {
    /// One target column per output unit.
    Outputs,
    /// One `label` column.
    Label,
}

/// Counts physical lines the way the CSV reader ends them: `\n`, `\r\n` or a lone `\r`.
#[derive(Clone, Copy)]
struct LineCounter {
    line: u64,
    after_cr: bool,
}

impl LineCounter {
    fn feed(&mut self, b: u8) {
        match b {
            b'\n' if self.after_cr => self.after_cr = false,
            b'\n' => self.line += 1,
            b'\r' => {
                self.line += 1;
                self.after_cr = true;
            }
            _ => self.after_cr = false,
        }
    }
}

/// The bytes handed to the CSV reader since the end of the last complete record, with the line
/// count up to that point. The reader skips blank lines and its own positions do not count them,
/// so line numbers for messages come from here.
struct Window {
    /// Absolute offset of `bytes[0]`: the end of the last complete record.
    base: u64,
    /// Bytes read ahead of `base`; never more than `limit`.
    bytes: Vec<u8>,
    /// Line count at `base`.
    lines: LineCounter,
    /// Most bytes a record may take.
    limit: u64,
    /// Set when a record ran into the limit.
    tripped: bool,
}

impl Window {
    /// The line of the first byte after `base` that is not a line break (the start of the next
    /// record), or the line at the end of the bytes read so far.
    fn next_line(&self) -> u64 {
        let mut lines = self.lines;
        for &b in &self.bytes {
            if b != b'\r' && b != b'\n' {
                return lines.line;
            }
            lines.feed(b);
        }
        lines.line
    }

    /// Moves `base` to `end` (the reader's position after a record) and returns the line where
    /// that record started.
    fn complete(&mut self, end: u64) -> u64 {
        let start = self.next_line();
        let n = usize::try_from(end.saturating_sub(self.base))
            .map_or(self.bytes.len(), |n| n.min(self.bytes.len()));
        for &b in &self.bytes[..n] {
            self.lines.feed(b);
        }
        self.bytes.drain(..n);
        self.base += n as u64;
        start
    }
}

/// A reader that refuses to read more than `limit` bytes past the end of the last complete
/// record, so one record can never make the reader hold more than that.
struct Guard<R> {
    inner: R,
    window: Rc<RefCell<Window>>,
}

impl<R: Read> Read for Guard<R> {
    fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
        let mut w = self.window.borrow_mut();
        let room = w.limit.saturating_sub(w.bytes.len() as u64);
        if room == 0 && !buf.is_empty() {
            w.tripped = true;
            return Err(io::Error::other("record too large"));
        }
        let n = usize::try_from(room).map_or(buf.len(), |r| r.min(buf.len()));
        let got = self.inner.read(&mut buf[..n])?;
        w.bytes.extend_from_slice(&buf[..got]);
        Ok(got)
    }
}

fn read_from<R: Read>(
    name: &str,
    reader: R,
    model: &Model,
    limit: u64,
) -> Result<Dataset, DataError> {
    let window = Rc::new(RefCell::new(Window {
        base: 0,
        bytes: Vec::new(),
        lines: LineCounter {
            line: 1,
            after_cr: false,
        },
        limit,
        tripped: false,
    }));
    let guard = Guard {
        inner: reader,
        window: window.clone(),
    };
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(guard);
    let mut rec = csv::StringRecord::new();
    let csv_error = |e: csv::Error| -> DataError {
        let w = window.borrow();
        let line = Some(w.next_line());
        match e.kind() {
            csv::ErrorKind::Io(_) if w.tripped => DataError::new(
                Code::D11,
                name,
                line,
                format!("the record starting here is longer than {limit} bytes"),
            )
            .help("a record this long usually means a quote (\") that is never closed, or input that is not CSV text"),
            csv::ErrorKind::Io(io) if LimitError::of(io).is_some() => {
                match LimitError::of(io) {
                    Some(l @ LimitError::BadGzip(_)) => {
                        DataError::new(Code::D15, name, line, l.to_string())
                            .help("the file may be cut short: copy or compress it again")
                    }
                    Some(l) => DataError::new(Code::D14, name, line, l.to_string()).help(
                        "split the data into smaller files; limits are in the reference",
                    ),
                    None => DataError::new(Code::D01, name, line, io.to_string()),
                }
            }
            csv::ErrorKind::Io(io) => DataError::new(
                Code::D01,
                name,
                line,
                format!("cannot read the data file: {io}"),
            ),
            csv::ErrorKind::Utf8 { .. } => {
                DataError::new(Code::D12, name, line, "this line is not valid UTF-8 text")
                    .help("save the file as UTF-8 (plain ASCII is fine)")
            }
            _ => DataError::new(
                Code::D12,
                name,
                line,
                format!("cannot read this record as CSV: {e}"),
            ),
        }
    };
    // Reads the next record; returns the line it starts on, or None at the end of the file.
    let mut next = |rec: &mut csv::StringRecord| -> Result<Option<u64>, DataError> {
        match rdr.read_record(rec) {
            Ok(true) => Ok(Some(window.borrow_mut().complete(rdr.position().byte()))),
            Ok(false) => Ok(None),
            Err(e) => Err(csv_error(e)),
        }
    };

    let Some(header_line) = next(&mut rec)? else {
        return Err(
            DataError::new(Code::D02, name, None, "the data file is empty")
                .help(header_help(model)),
        );
    };
    let mut header: Vec<String> = rec.iter().map(str::to_string).collect();
    if let Some(first) = header.first_mut() {
        if let Some(rest) = first.strip_prefix('\u{feff}') {
            *first = rest.trim().to_string();
        }
    }

    let n_in = model.input.width;
    let out = model.output();
    let n_out = out.width;
    let classifier = model.is_classifier();
    if !header.is_empty() && header.iter().all(|h| h.parse::<f64>().is_ok()) {
        // Read as a header, a line of numbers would shift every sample by one line and fail later.
        return Err(DataError::new(
            Code::D16,
            name,
            Some(header_line),
            "the first line holds numbers: the file has no header",
        )
        .help(header_help(model)));
    }
    let last_is_label = header.len() == n_in + 1 && header.last().is_some_and(|h| h == "label");
    let layout = if last_is_label && classifier {
        Layout::Label
    } else if header.len() == n_in + n_out {
        Layout::Outputs
    } else if last_is_label {
        return Err(DataError::new(
            Code::D10,
            name,
            Some(header_line),
            format!(
                "the header ends in a `label` column, but `{}` is not a classifier (its loss is squared_error)",
                model.name
            ),
        )
        .help(format!(
            "give the {n_out} target values of output `{}` as {n_out} columns after the inputs",
            out.name
        )));
    } else {
        // A window or a grid says how its columns add up: `100 x 6 = 600 input columns`.
        let n_in_words = match model.input.shape.rank {
            1 => n_in.to_string(),
            _ => format!("{} = {n_in}", model.input.shape.words()),
        };
        let outputs = format!(
            "{} ({n_in_words} input {} for `{}`, then {n_out} output {} for `{}`)",
            n_in + n_out,
            plural(n_in, "column", "columns"),
            model.input.name,
            plural(n_out, "column", "columns"),
            out.name
        );
        let expected = if classifier && n_out == 1 {
            format!("{} or a `label` column)", outputs.trim_end_matches(')'))
        } else if classifier {
            format!(
                "{outputs} or {} ({n_in_words} input columns, then a `label` column)",
                n_in + 1
            )
        } else {
            outputs
        };
        let found = header.len();
        let mut e = DataError::new(
            Code::D04,
            name,
            Some(header_line),
            format!(
                "the header has {found} {}, expected {expected}",
                plural(found, "column", "columns")
            ),
        );
        if classifier
            && header.len() == n_in + 1
            && header
                .last()
                .is_some_and(|h| h.eq_ignore_ascii_case("label"))
        {
            e = e.help("the label column's header must be exactly `label` (lowercase)");
        } else if classifier && header.len() == n_in + 1 {
            e = e.help(format!(
                "for a class per line, head the last column exactly `label` (it is {})",
                quote(header.last().map_or("", String::as_str))
            ));
        } else {
            e = e.help(header_help(model));
        }
        return Err(e);
    };
    let layout_words = match layout {
        Layout::Label => format!("{n_in} inputs, then a `label` column"),
        Layout::Outputs => format!(
            "{n_in} inputs, then {n_out} {}",
            plural(n_out, "output", "outputs")
        ),
    };
    let width = match layout {
        Layout::Label => n_in + 1,
        Layout::Outputs => n_in + n_out,
    };
    let n_classes = if n_out == 1 { 2 } else { n_out };
    let column = |j: usize| -> String {
        match header.get(j) {
            Some(h) if !h.is_empty() => format!("column {} (`{h}`)", j + 1),
            _ => format!("column {}", j + 1),
        }
    };

    let mut ds = Dataset {
        inputs: Vec::new(),
        targets: Vec::new(),
        labels: (layout == Layout::Label).then(Vec::new),
        input_names: header.iter().take(n_in).cloned().collect(),
    };
    while let Some(line) = next(&mut rec)? {
        if rec.len() != width {
            let found = rec.len();
            return Err(DataError::new(
                Code::D05,
                name,
                Some(line),
                format!(
                    "this line has {found} {}, expected {width} ({layout_words}, as the header on line {header_line} says)",
                    plural(found, "field", "fields")
                ),
            ));
        }
        let mut inputs = Vec::with_capacity(n_in);
        for (j, cell) in rec.iter().enumerate().take(n_in) {
            inputs.push(number(name, line, cell, || column(j))?);
        }
        let targets = match layout {
            Layout::Outputs => {
                let mut t = Vec::with_capacity(n_out);
                for (j, cell) in rec.iter().enumerate().skip(n_in) {
                    let v = number(name, line, cell, || column(j)).map_err(|e| {
                        if !classifier && header.get(j).is_some_and(|h| h == "label") {
                            e.help(format!(
                                "a `label` column holds classes only for a cross-entropy model; `{}` is a regressor, so this column is the target value of output `{}`",
                                model.name, out.name
                            ))
                        } else if classifier && width == n_in + 1 {
                            // A class per line under a header other than `label`.
                            e.help(format!(
                                "a class name or index per line needs the last column headed exactly `label` (it is {})",
                                quote(header.get(j).map_or("", String::as_str))
                            ))
                        } else {
                            e
                        }
                    })?;
                    if classifier && !(0.0..=1.0).contains(&v) {
                        return Err(DataError::new(
                            Code::D13,
                            name,
                            Some(line),
                            format!("target {} in {} is outside [0, 1]", quote(cell), column(j)),
                        )
                        .help(format!(
                            "a cross-entropy output takes targets in [0, 1]; to give a class per line instead, put its name or index in one column headed `label` after the {n_in} inputs"
                        )));
                    }
                    t.push(v);
                }
                t
            }
            Layout::Label => {
                let cell = rec.get(n_in).unwrap_or("");
                let class = label(name, line, cell, || column(n_in), model, n_classes)?;
                if let Some(l) = ds.labels.as_mut() {
                    l.push(class);
                }
                if n_out == 1 {
                    vec![class as f64]
                } else {
                    (0..n_out)
                        .map(|k| if k == class { 1.0 } else { 0.0 })
                        .collect()
                }
            }
        };
        ds.inputs.push(inputs);
        ds.targets.push(targets);
    }
    if ds.is_empty() {
        return Err(DataError::new(
            Code::D03,
            name,
            Some(header_line),
            "the data file has a header but no samples",
        ));
    }
    if classifier && layout == Layout::Outputs {
        ds.labels = ds.targets.iter().map(|t| class_of(t)).collect();
    }
    Ok(ds)
}

/// The class of a target row that is exactly a class: 0.0 / 1.0 for one unit, else one-hot.
fn class_of(t: &[f64]) -> Option<usize> {
    match t {
        [v] if *v == 0.0 => Some(0),
        [v] if *v == 1.0 => Some(1),
        [_] => None,
        _ => {
            let ones: Vec<usize> = (0..t.len()).filter(|&k| t[k] == 1.0).collect();
            let zeros = t.iter().filter(|&&v| v == 0.0).count();
            match ones.as_slice() {
                [k] if zeros + 1 == t.len() => Some(*k),
                _ => None,
            }
        }
    }
}

fn header_help(model: &Model) -> String {
    let n_in = model.input.width;
    let x = &model.input.name;
    let inputs = if n_in > 3 {
        format!("{x}1,...,{x}{n_in}")
    } else {
        (1..=n_in)
            .map(|k| format!("{x}{k}"))
            .collect::<Vec<_>>()
            .join(",")
    };
    let out = model.output();
    let outputs = match &model.classes {
        Some(c) if c.len() == out.width => c.join(","),
        _ if out.width == 1 => out.name.clone(),
        _ if out.width > 3 => format!("{}1,...,{}{}", out.name, out.name, out.width),
        _ => (1..=out.width)
            .map(|k| format!("{}{k}", out.name))
            .collect::<Vec<_>>()
            .join(","),
    };
    if model.is_classifier() {
        format!(
            "a header for `{}` reads `{inputs},label` (a class per line) or `{inputs},{outputs}` (one target per output unit)",
            model.name
        )
    } else {
        format!("a header for `{}` reads `{inputs},{outputs}`", model.name)
    }
}

fn plural<'a>(n: usize, one: &'a str, many: &'a str) -> &'a str {
    if n == 1 {
        one
    } else {
        many
    }
}

/// Parses a cell; `column` names it, and is called only to report an error.
fn number(
    name: &str,
    line: u64,
    cell: &str,
    column: impl Fn() -> String,
) -> Result<f64, DataError> {
    let parsed = cell.parse::<f64>();
    if let Ok(v) = parsed {
        if v.is_finite() {
            return Ok(v);
        }
    }
    let column = column();
    if cell.is_empty() {
        return Err(
            DataError::new(Code::D06, name, Some(line), format!("{column} is empty"))
                .help("every cell needs a value; sinew does not fill in missing values"),
        );
    }
    match parsed {
        Ok(_) => Err(DataError::new(
            Code::D07,
            name,
            Some(line),
            format!("cell {} in {column} is not a finite number", quote(cell)),
        )
        .help("NaN and infinity cannot be trained on: repair or remove this line")),
        Err(_) => Err(DataError::new(
            Code::D06,
            name,
            Some(line),
            format!("cell {} in {column} is not a number", quote(cell)),
        )),
    }
}

/// Reads a label cell as a class index; `column` names it, and is called only to report an
/// error.
fn label(
    name: &str,
    line: u64,
    cell: &str,
    column: impl Fn() -> String,
    model: &Model,
    n_classes: usize,
) -> Result<usize, DataError> {
    if let Some(i) = model
        .classes
        .as_ref()
        .and_then(|c| c.iter().position(|c| c == cell))
    {
        return Ok(i);
    }
    let index = cell
        .parse::<f64>()
        .ok()
        .filter(|v| v.is_finite() && v.fract() == 0.0);
    if let Some(v) = index {
        if v >= 0.0 && v < n_classes as f64 {
            return Ok(v as usize);
        }
    }
    let column = column();
    let range = format!("0 to {}", n_classes - 1);
    if index.is_some() {
        let e = DataError::new(
            Code::D09,
            name,
            Some(line),
            format!(
                "class index {} in {column} is out of range: the model has {n_classes} classes ({range})",
                quote(cell)
            ),
        );
        return Err(match &model.classes {
            Some(classes) => {
                let listed: Vec<String> = classes
                    .iter()
                    .enumerate()
                    .map(|(k, c)| format!("{k} `{c}`"))
                    .collect();
                e.help(format!("the classes are {}", listed.join(", ")))
            }
            None => e,
        });
    }
    let e = match &model.classes {
        Some(classes) => {
            let mut e = DataError::new(
                Code::D08,
                name,
                Some(line),
                format!("unknown class {} in {column}; the classes are {}", quote(cell), classes.join(", ")),
            );
            let near = classes
                .iter()
                .map(|c| (strsim::damerau_levenshtein(c, cell), c))
                .filter(|(d, c)| *d <= (c.len() / 3).max(1))
                .min_by_key(|(d, _)| *d);
            e = match near {
                Some((_, c)) => e.help(format!("did you mean `{c}`?")),
                None => e.help(format!("a label is a class name or a class index from {range}")),
            };
            e
        }
        None => DataError::new(
            Code::D08,
            name,
            Some(line),
            format!("label {} in {column} is not a class index, and the spec names no classes", quote(cell)),
        )
        .help(format!(
            "use class indices from {range}, or name the classes with `classes ...` on the spec's output line"
        )),
    };
    Err(e)
}

/// Splits `ds` into `(train, validation)`, putting a `fraction` of the samples into validation.
///
/// Deterministic for a given `seed`. `fraction` is clamped to `[0, 1]` (NaN counts as 0). The
/// validation part has `round(fraction * n)` samples (halves rounded up). With labels the split
/// is stratified: class `c` with `n_c` samples contributes `floor(fraction * n_c)` samples, and
/// the samples still missing from the total go one each to the classes with the largest
/// remainders `fraction * n_c - floor(fraction * n_c)` (lower class index first on ties), so
/// every class is within one sample of its proportional share. The samples of each class, in
/// class order (or all samples, without labels), are shuffled with one SplitMix64 stream seeded
/// with `seed` by the Fisher–Yates shuffle (Knuth, TAOCP vol. 2, Algorithm P; index `j` drawn
/// as `next_u64 % (i + 1)`), and the first ones go to validation. Both parts keep the file's
/// order, are disjoint and together hold every sample.
///
/// # Examples
/// ```
/// use sinew::data::{split, Dataset};
///
/// let ds = Dataset {
///     inputs: (0..10).map(|i| vec![i as f64]).collect(),
///     targets: (0..10).map(|i| vec![(i % 2) as f64]).collect(),
///     labels: Some((0..10).map(|i| i % 2).collect()),
///     input_names: vec!["x".into()],
/// };
/// let (train, valid) = split(&ds, 0.2, 42);
/// assert_eq!((train.len(), valid.len()), (8, 2));
/// let mut v = valid.labels.unwrap();
/// v.sort();
/// assert_eq!(v, [0, 1]); // one sample of each class
/// ```
pub fn split(ds: &Dataset, fraction: f64, seed: u64) -> (Dataset, Dataset) {
    let f = if fraction.is_nan() {
        0.0
    } else {
        fraction.clamp(0.0, 1.0)
    };
    let n = ds.len();
    let mut rng = SplitMix64::new(seed);
    let total = (f * n as f64).round() as usize;
    let mut in_valid = vec![false; n];
    match ds.labels.as_ref().filter(|l| l.len() == n) {
        Some(labels) => {
            let k = labels.iter().max().map_or(0, |m| m + 1);
            let mut groups: Vec<Vec<usize>> = vec![Vec::new(); k];
            for (i, &c) in labels.iter().enumerate() {
                groups[c].push(i);
            }
            let shares: Vec<f64> = groups.iter().map(|g| f * g.len() as f64).collect();
            let mut counts: Vec<usize> = shares.iter().map(|s| s.floor() as usize).collect();
            let mut order: Vec<usize> = (0..k).collect();
            order.sort_by(|&a, &b| {
                let ra = shares[a] - shares[a].floor();
                let rb = shares[b] - shares[b].floor();
                rb.total_cmp(&ra).then(a.cmp(&b))
            });
            let mut missing = total.saturating_sub(counts.iter().sum());
            for &c in order.iter().cycle().take(k * 2) {
                if missing == 0 {
                    break;
                }
                if counts[c] < groups[c].len() {
                    counts[c] += 1;
                    missing -= 1;
                }
            }
            for (group, &count) in groups.iter_mut().zip(&counts) {
                shuffle(group, &mut rng);
                for &i in group.iter().take(count) {
                    in_valid[i] = true;
                }
            }
        }
        None => {
            let mut all: Vec<usize> = (0..n).collect();
            shuffle(&mut all, &mut rng);
            for &i in all.iter().take(total) {
                in_valid[i] = true;
            }
        }
    }
    let train: Vec<usize> = (0..n).filter(|&i| !in_valid[i]).collect();
    let valid: Vec<usize> = (0..n).filter(|&i| in_valid[i]).collect();
    (ds.subset(&train), ds.subset(&valid))
}

/// Fisher–Yates shuffle (Knuth, TAOCP vol. 2, Algorithm P): for `i` from `len - 1` down to 1,
/// swap element `i` with element `next_u64 % (i + 1)` (the modulo bias is below 2^-40 for the
/// sizes used here). Shared by the split and the trainer's mini-batch order.
pub fn shuffle<X>(v: &mut [X], rng: &mut SplitMix64) {
    for i in (1..v.len()).rev() {
        let j = (rng.next_u64() % (i as u64 + 1)) as usize;
        v.swap(i, j);
    }
}

/// Per-feature mean and population standard deviation of the inputs, for `standardize`
/// (compute them on the training split).
///
/// Two passes in sample order: `mean_j = (1/n) sum_i x_ij`, then
/// `std_j = sqrt((1/n) sum_i (x_ij - mean_j)^2)`. A constant feature (std 0) gets std 1.0, so
/// scaling only centres it instead of dividing by zero. With no samples every mean is 0 and
/// every std 1. The width is the number of input columns ([`Dataset::input_names`]). Bits are
/// those of [`mean_spread`], the std of a constant feature replaced by 1.
///
/// # Examples
/// ```
/// use sinew::data::{mean_std, Dataset};
///
/// let ds = Dataset {
///     inputs: vec![vec![1.0, 5.0], vec![3.0, 5.0]],
///     targets: vec![vec![0.0], vec![1.0]],
///     labels: None,
///     input_names: vec!["a".into(), "b".into()],
/// };
/// assert_eq!(mean_std(&ds), (vec![2.0, 5.0], vec![1.0, 1.0]));
/// ```
pub fn mean_std(ds: &Dataset) -> (Vec<f64>, Vec<f64>) {
    let (mean, spread) = mean_spread(ds);
    let std = spread
        .into_iter()
        .map(|s| if s > 0.0 { s } else { 1.0 })
        .collect();
    (mean, std)
}

/// [`mean_std`] for a window or a grid of `channels` channels: one mean and one standard
/// deviation per channel over every position of every sample (the value at flat index `i`
/// belongs to channel `i mod channels`), repeated for every position so that the result has one
/// entry per input value, as the model's scaling holds it. Same two passes in sample order, then
/// position order; a constant channel gets std 1.
pub fn mean_std_channels(ds: &Dataset, channels: usize) -> (Vec<f64>, Vec<f64>) {
    let width = ds.input_names.len();
    let c = channels.max(1);
    let n = (ds.len() * width.div_ceil(c)) as f64;
    let mut mean = vec![0.0; c];
    let mut var = vec![0.0; c];
    if !ds.is_empty() {
        for row in &ds.inputs {
            for (i, x) in row.iter().enumerate() {
                mean[i % c] += x;
            }
        }
        for m in &mut mean {
            *m /= n;
        }
        for row in &ds.inputs {
            for (i, x) in row.iter().enumerate() {
                let d = x - mean[i % c];
                var[i % c] += d * d;
            }
        }
    }
    let std: Vec<f64> = var
        .iter()
        .map(|v| if ds.is_empty() { 0.0 } else { (v / n).sqrt() })
        .map(|s| if s > 0.0 { s } else { 1.0 })
        .collect();
    let spread = |v: &[f64]| (0..width).map(|i| v[i % c]).collect::<Vec<f64>>();
    (spread(&mean), spread(&std))
}

/// Per-feature mean and population standard deviation as computed, a constant feature keeping
/// std 0 (the figures [`mean_std`] starts from; `workflow::advice` judges the data's scales by
/// them). With no samples every mean and std is 0.
pub fn mean_spread(ds: &Dataset) -> (Vec<f64>, Vec<f64>) {
    let width = ds.input_names.len();
    let n = ds.len();
    if n == 0 {
        return (vec![0.0; width], vec![0.0; width]);
    }
    let mut mean = vec![0.0; width];
    for row in &ds.inputs {
        for (m, x) in mean.iter_mut().zip(row) {
            *m += x;
        }
    }
    for m in &mut mean {
        *m /= n as f64;
    }
    let mut var = vec![0.0; width];
    for row in &ds.inputs {
        for ((v, x), m) in var.iter_mut().zip(row).zip(&mean) {
            *v += (x - m) * (x - m);
        }
    }
    let std = var.iter().map(|v| (v / n as f64).sqrt()).collect();
    (mean, std)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ir::*;
    use std::cell::Cell;

    fn model() -> Model {
        Model {
            name: "m".into(),
            scalar: Scalar::F64,
            input: Input::vector("x", 1, false),
            layers: vec![Layer::dense("y", 1, 1, Activation::Identity)],
            classes: None,
            loss: Loss::SquaredError,
            penalty: Penalty::None,
            init: Init::Glorot,
            seed: 0,
            train: defaults::TRAIN,
            budget: Budget::default(),
        }
    }

    #[test]
    fn a_record_over_the_limit_is_refused_on_its_line() {
        // Limit 64 bytes: the third record is 100 bytes long.
        let long = "9".repeat(99);
        let text = format!("a,b\n1,2\n3,4\n{long},1\n5,6\n");
        let err = read_from("t.csv", text.as_bytes(), &model(), 64).unwrap_err();
        assert_eq!(err.code, "D11");
        assert_eq!(err.line, Some(4));
        // The same text under a larger limit reads fine.
        assert_eq!(
            read_from("t.csv", text.as_bytes(), &model(), 1 << 10)
                .unwrap()
                .len(),
            4
        );
    }

    #[test]
    fn the_guard_reads_no_further_than_the_limit() {
        struct Counting<'a>(&'a [u8], Rc<Cell<usize>>);
        impl Read for Counting<'_> {
            fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
                let n = self.0.read(buf)?;
                self.1.set(self.1.get() + n);
                Ok(n)
            }
        }
        // One endless record (an unclosed quote): 10 MB of text, limit 4 KiB.
        let text = format!("a,b\n\"{}", "x".repeat(10_000_000));
        let count = Rc::new(Cell::new(0));
        let err = read_from(
            "t.csv",
            Counting(text.as_bytes(), count.clone()),
            &model(),
            4096,
        )
        .unwrap_err();
        assert_eq!(err.code, "D11");
        assert!(count.get() <= 4096 + 4, "read {} bytes", count.get());
    }
}

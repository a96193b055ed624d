//! Every stable code of a finding: spec diagnostics (`S`, `W`), data-file errors (`D`) and
//! weights-file errors (`F`). The table with an example and a fix for each is in
//! `grammar/REFERENCE.md`; a variant is named by its code, so the code found in a message, in
//! the reference and in the source is one word.
//!
//! [`Code::as_str`] gives the text shown in messages (`error[S0102]`), in JSON and in snapshots.
//! [`Code::exit_status`] is the one mapping from a code to the `sinew` command's exit status.

use serde::{Serialize, Serializer};
use std::fmt;

/// Declares the enum, its list and its text from one table, so they cannot drift apart.
macro_rules! codes {
    ($( $(#[$doc:meta])* $name:ident, )*) => {
        /// A stable code of a finding; see the [module documentation](self).
        #[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
        pub enum Code {
            $( $(#[$doc])* $name, )*
        }

        impl Code {
            /// Every code, in the order of the reference tables.
            pub const ALL: &'static [Code] = &[$(Code::$name,)*];

            /// The code as shown in messages, e.g. `"S0102"`.
            pub const fn as_str(self) -> &'static str {
                match self {
                    $( Code::$name => stringify!($name), )*
                }
            }
        }
    };
}

codes! {
    // Spec errors (`S01xx` syntax, `S02xx` sections, `S03xx` names, `S04xx` sizes, `S05xx` compatibility, `S06xx` values, `S07xx` budget).
    /// More than 100 problems; the rest are not shown.
    S0100,
    /// A line starts with a word that is not a section keyword.
    S0101,
    /// An unknown activation.
    S0102,
    /// An unknown word where a fixed word belongs (scalar type, loss, unit, optimizer, option).
    S0103,
    /// A value is missing or malformed (name, width, number, whole number).
    S0104,
    /// Extra text after a complete statement, or options out of order.
    S0105,
    /// An invisible character (no-break space, control character, zero-width space) between words.
    S0106,
    /// `x` where it does not belong: not between two sizes (`100 x 6`), or sizes written without spaces (`100x6`).
    S0107,
    /// No `model` line.
    S0201,
    /// No `input` line.
    S0202,
    /// No `output` line.
    S0203,
    /// No `loss` line.
    S0204,
    /// A section other than `layer` appears twice.
    S0205,
    /// A section is out of order.
    S0206,
    /// A name is not lower_snake.
    S0301,
    /// A name is a Rust keyword.
    S0302,
    /// A name contains a non-ASCII character (often a look-alike).
    S0303,
    /// A name is a Rust raw identifier.
    S0304,
    /// Two layers, or a layer and the input, share a name.
    S0305,
    /// A class name is listed twice.
    S0306,
    /// A size of 0 (width, steps, rows, columns, channels, filters, kernel or window).
    S0401,
    /// A size above 65535.
    S0402,
    /// More than 16 Mi parameters in total.
    S0403,
    /// A kernel larger than its (padded) input.
    S0404,
    /// A stride of 0.
    S0405,
    /// A pooling window larger than its input.
    S0406,
    /// `conv`, `depthwise` or `pool` on a vector (a vector input, or after a dense layer).
    S0407,
    /// A map (the input, or what a layer writes) of more than 1 Mi values.
    S0408,
    /// A shape with the wrong number of sizes (an input of more than 3, a kernel that does not fit the input's rank).
    S0409,
    /// Softmax on a hidden layer.
    S0501,
    /// A softmax output with 1 unit.
    S0502,
    /// `cross_entropy` with an output that is not sigmoid or softmax.
    S0503,
    /// The number of class names does not match the output.
    S0504,
    /// `classes` on an output trained with `squared_error`.
    S0505,
    /// A penalty strength that is negative or not finite.
    S0601,
    /// A learning rate that is not above 0 or not finite.
    S0602,
    /// A momentum outside [0, 1).
    S0603,
    /// An Adam `beta1` or `beta2` outside (0, 1).
    S0604,
    /// A `leaky_relu` slope outside [0, 1).
    S0605,
    /// A `uniform` half-width that is not above 0.
    S0606,
    /// A batch size or number of epochs of 0.
    S0607,
    /// A batch size or number of epochs above 4294967295.
    S0608,
    /// A seed that does not fit in 64 bits.
    S0609,
    /// The model needs more flash than `budget flash` allows.
    S0701,
    /// Inference needs more RAM than `budget ram` allows.
    S0702,
    /// A budget amount does not fit in 64 bits of bytes.
    S0703,
    /// On-device training needs more RAM than `budget train_ram` allows.
    S0704,
    // Spec warnings: the spec is accepted.
    /// `squared_error` with a softmax output (learns slowly when confidently wrong).
    W0101,
    /// More than four sigmoid hidden layers in a row (each sigmoid scales the error by at most 1/4).
    W0102,
    /// A batch larger than 1024 samples (few optimizer steps per epoch).
    W0103,
    /// A penalty of strength 0, which has no effect.
    W0104,
    /// An input line with neither `standardize` nor `unscaled`.
    W0105,
    // Training warnings: the weights are written.
    /// The input columns of a model without `standardize` are on very different or large scales.
    W0201,
    /// A class with samples in the validation split (the training data without one) is never predicted there.
    W0202,
    // Data file errors (`sinew train`, `eval`, `grad`, `gradcheck --data`).
    /// The file cannot be opened or read.
    D01,
    /// The file is empty: no header (blank lines only count as empty).
    D02,
    /// The file has a header but no samples.
    D03,
    /// The header's column count fits neither layout (inputs then one column per output unit, or inputs then `label` for a classifier).
    D04,
    /// A line's field count differs from the header's.
    D05,
    /// A cell is not a number, or is empty.
    D06,
    /// A cell is NaN or infinite.
    D07,
    /// A label is neither a class name nor a whole number.
    D08,
    /// A class index is out of range.
    D09,
    /// A `label` column for a model that does not classify (`squared_error`) with more than one output unit.
    D10,
    /// A single record is longer than 1 MiB (1 048 576 bytes).
    D11,
    /// A line is not UTF-8 text (or not readable as CSV).
    D12,
    /// A classifier's target is outside [0, 1].
    D13,
    /// The data is larger than its limit, or gzip data expands like a decompression bomb.
    D14,
    /// Data that starts like gzip is not a valid gzip stream.
    D15,
    /// The first line holds numbers: the file has no header.
    D16,
    // Weights file errors (the loaders of [`crate::weights`] and the build API).
    /// The file cannot be read or written.
    F01,
    /// The file is not valid JSON, or not UTF-8 text.
    F02,
    /// The file ends early: it is truncated.
    F03,
    /// The JSON does not have the layout of a weights file: a missing, unknown or repeated field, or a value of the wrong type.
    F04,
    /// Not a sinew weights file, an unsupported version, or a malformed fingerprint.
    F05,
    /// A value is not finite, overflows an `f64`, or is outside the `f32` range in an `f32` file.
    F06,
    /// The fingerprint does not match the spec (the shapes agree, so an activation or its slope differs, or the `fingerprint` was edited).
    F07,
    /// The number of layers differs from the spec.
    F08,
    /// A layer's name differs from the spec.
    F09,
    /// A layer's shape differs from the spec: its rows (units), a row's columns (units feeding it) or its biases.
    F10,
    /// The scalar type differs from the spec.
    F11,
    /// Standardization statistics are missing, unexpected, of the wrong length, or a `std` is not > 0.
    F12,
}

/// What a failure means for the caller of the `sinew` command, as its process exit status.
///
/// The command exits with 0 on success, [`ExitStatus::Spec`] (1) when the inputs are readable
/// but wrong (errors in a spec, data or weights that do not fit it, a failed gradient check) and
/// [`ExitStatus::Usage`] (2) for usage and I/O problems (a file that cannot be read or written,
/// an argument out of range).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ExitStatus {
    /// Errors in a spec, or data or weights that do not fit it: exit code 1.
    Spec,
    /// A usage or I/O problem: exit code 2.
    Usage,
}

impl ExitStatus {
    /// The process exit code: 1 or 2.
    pub const fn code(self) -> u8 {
        match self {
            ExitStatus::Spec => 1,
            ExitStatus::Usage => 2,
        }
    }
}

impl Code {
    /// The exit status of a command that fails with this code: [`ExitStatus::Usage`] for a
    /// file that cannot be read or written (`D01`, `F01`), [`ExitStatus::Spec`] for every other
    /// code.
    pub const fn exit_status(self) -> ExitStatus {
        match self {
            Code::D01 | Code::F01 => ExitStatus::Usage,
            _ => ExitStatus::Spec,
        }
    }
}

impl fmt::Display for Code {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

impl Serialize for Code {
    /// As its text, e.g. `"S0102"`.
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.as_str())
    }
}

impl PartialEq<&str> for Code {
    fn eq(&self, other: &&str) -> bool {
        self.as_str() == *other
    }
}

impl PartialEq<str> for Code {
    fn eq(&self, other: &str) -> bool {
        self.as_str() == other
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn texts_are_unique_and_well_formed() {
        let mut seen = std::collections::HashSet::new();
        for c in Code::ALL {
            let s = c.as_str();
            assert!(seen.insert(s), "{s} twice");
            let (letter, digits) = s.split_at(1);
            assert!(matches!(letter, "S" | "W" | "D" | "F"), "{s}");
            let n = if matches!(letter, "S" | "W") { 4 } else { 2 };
            assert!(
                digits.len() == n && digits.bytes().all(|b| b.is_ascii_digit()),
                "{s}"
            );
        }
    }

    #[test]
    fn every_code_is_in_the_reference() {
        // The reference tables of grammar/REFERENCE.md list every code with an example.
        let reference = include_str!("../../grammar/REFERENCE.md");
        for c in Code::ALL {
            assert!(
                reference.contains(&format!("| `{c}` |")),
                "{c} is not in the reference"
            );
        }
    }

    #[test]
    fn only_unreadable_files_exit_as_usage_errors() {
        for c in Code::ALL {
            let usage = matches!(c, Code::D01 | Code::F01);
            assert_eq!(c.exit_status() == ExitStatus::Usage, usage, "{c}");
        }
        assert_eq!(Code::S0102, "S0102");
    }
}

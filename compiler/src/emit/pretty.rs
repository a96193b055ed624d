//! Token stream -> `syn::File` -> prettyplease text, with the header in front.

use proc_macro2::TokenStream;

/// Parses `tokens` as a file, prints it with prettyplease and prepends `header` (which ends in a
/// newline).
///
/// The emitter only produces well-formed items, so parsing cannot fail on a checked model; should
/// it fail anyway (an emitter bug), the result is the unformatted token text, so that rustc
/// reports the fault at its place, never a panic.
pub(super) fn render(tokens: TokenStream, header: &str) -> String {
    match syn::parse2::<syn::File>(tokens.clone()) {
        Ok(file) => format!("{header}{}", prettyplease::unparse(&file)),
        Err(_) => format!("{header}{tokens}\n"),
    }
}

//! Token stream -> `syn::File` -> prettyplease text, with the header in front.

use proc_macro2::TokenStream;

/// Parses `tokens` as a file, prints it with prettyplease and prepends `header` (which ends in a
/// newline).
///
/// The emitter only produces well-formed items, so parsing cannot fail on a checked model; should
/// it fail anyway (an emitter bug), the result is a file whose only item is a `compile_error!`
/// naming the parse error, never a panic.
pub(super) fn render(tokens: TokenStream, header: &str) -> String {
    match syn::parse2::<syn::File>(tokens) {
        Ok(file) => format!("{header}{}", prettyplease::unparse(&file)),
        Err(e) => {
            let msg = format!("sinew: internal error, the generated code does not parse: {e}");
            format!("{header}compile_error!({msg:?});\n")
        }
    }
}

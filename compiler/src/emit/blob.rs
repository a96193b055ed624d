//! The device weight blob methods: `Params::from_blob`, `load_blob` and `to_blob`.
//!
//! The blob's values are the fields of `Params` in declaration order: per layer its weights
//! (row-major) then its biases, then with `standardize` the input mean and std. The framing and
//! every check are the runtime's (`sinew_runtime::blob`); what is generated here is only the list
//! of fields, so the layout has one definition and `sinew pack` writes the same bytes.

use super::{ident, Ctx};
use proc_macro2::TokenStream;
use quote::quote;

/// The fields of `Params` in blob order, as `self.<field>` slices.
fn fields(cx: &Ctx, mutable: bool) -> Vec<TokenStream> {
    let mut v = Vec::new();
    for (_, _, n) in cx.param_layers() {
        let w = ident(&n.weights);
        let b = ident(&n.bias);
        if mutable {
            v.push(quote!(self.#w.as_flattened_mut()));
            v.push(quote!(&mut self.#b));
        } else {
            v.push(quote!(self.#w.as_flattened()));
            v.push(quote!(&self.#b));
        }
    }
    if cx.model.input.standardize {
        for f in [super::ident::MEAN_FIELD, super::ident::STD_FIELD] {
            let f = ident(f);
            v.push(if mutable {
                quote!(&mut self.#f)
            } else {
                quote!(&self.#f)
            });
        }
    }
    v
}

/// A second `impl Params` block with the blob constants and methods.
pub(super) fn items(cx: &Ctx) -> TokenStream {
    let count_doc = if cx.model.input.standardize {
        " Values in a device weight blob of this model: every weight and bias, then the input mean and std."
    } else {
        " Values in a device weight blob of this model: every weight and bias."
    };
    let count_doc = super::doc(count_doc);
    let count = if cx.model.input.standardize {
        quote!(PARAMETERS + 2 * INPUTS)
    } else {
        quote!(PARAMETERS)
    };
    let reads = fields(cx, true)
        .into_iter()
        .map(|f| quote!(values.read_into(#f);));
    let writes = fields(cx, false)
        .into_iter()
        .map(|f| quote!(blob.write(#f);));
    quote! {
        impl Params {
            #count_doc
            pub const BLOB_VALUES: usize = #count;

            /// Bytes of a device weight blob of this model: a 20-byte header, the values, a
            /// 4-byte CRC-32 (see `sinew_runtime::blob`).
            pub const BLOB_BYTES: usize =
                rt::blob::blob_bytes(<Scalar as rt::blob::BlobScalar>::KIND, Self::BLOB_VALUES);

            /// Parameters decoded from a device weight blob (as `sinew pack` writes it, or
            /// [`Params::to_blob`]). No allocation; for a large model prefer
            /// [`Params::load_blob`] into a `static`.
            ///
            /// # Errors
            ///
            /// The runtime's [`rt::blob::BlobError`] naming the first check that failed: magic,
            /// version, scalar kind, fingerprint (a blob of another model), value count, length
            /// (truncated or over-long) or checksum (corrupt).
            pub fn from_blob(bytes: &[u8]) -> Result<Self, rt::blob::BlobError> {
                let mut params = Self::zeroed();
                params.load_blob(bytes)?;
                Ok(params)
            }

            /// Decodes a device weight blob into `self`, in place. Every check of
            /// [`Params::from_blob`] runs before any value is copied, so on an error `self` is
            /// unchanged.
            ///
            /// # Errors
            ///
            /// As [`Params::from_blob`].
            pub fn load_blob(&mut self, bytes: &[u8]) -> Result<(), rt::blob::BlobError> {
                let mut values =
                    rt::blob::Values::<Scalar>::open(bytes, FINGERPRINT, Self::BLOB_VALUES)?;
                #(#reads)*
                Ok(())
            }

            /// Writes the parameters as a device weight blob into the start of `out` (at least
            /// [`Params::BLOB_BYTES`] long), for saving weights learned on the device. Returns
            /// the blob's length.
            ///
            /// # Errors
            ///
            /// [`rt::blob::BlobError::BufferTooSmall`] when `out` is too short; nothing is
            /// written then.
            pub fn to_blob(&self, out: &mut [u8]) -> Result<usize, rt::blob::BlobError> {
                let mut blob =
                    rt::blob::Writer::<Scalar>::new(out, FINGERPRINT, Self::BLOB_VALUES)?;
                #(#writes)*
                blob.finish()
            }
        }
    }
}

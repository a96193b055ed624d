//! The class enum and `Params::classify`, when the spec names classes.

use super::{ident, usize_lit, Ctx};
use proc_macro2::TokenStream;
use quote::quote;

/// True for the one-unit sigmoid output read as two classes.
fn binary(cx: &Ctx) -> bool {
    cx.model.output().width == 1 && cx.names.classes.len() == 2
}

/// `pub enum Class` and its `impl`, or nothing without classes.
pub(super) fn items(cx: &Ctx) -> TokenStream {
    let Some(class_names) = &cx.model.classes else {
        return TokenStream::new();
    };
    let enum_name = ident(super::ident::CLASS_ENUM);
    let variants: Vec<_> = cx.names.classes.iter().map(|v| ident(v)).collect();
    let count = usize_lit(variants.len());
    let out_name = &cx.model.output().name;
    let is_binary = binary(cx);
    let defs = class_names
        .iter()
        .zip(&variants)
        .enumerate()
        .map(|(i, (name, v))| {
            let doc = if is_binary {
                let when = if i == 0 { "at most 0.5" } else { "above 0.5" };
                format!(" `{name}`: the output `{out_name}` is {when}.")
            } else {
                format!(" `{name}`: unit {i} of the output `{out_name}`.")
            };
            let doc = super::doc(&doc);
            quote! {
                #doc
                #v
            }
        });
    let name_arms = class_names
        .iter()
        .zip(&variants)
        .map(|(name, v)| quote!(Self::#v => #name,));
    let target_arms = variants.iter().enumerate().map(|(i, v)| {
        let vals = if is_binary {
            let one = if i == 0 { quote!(0.0) } else { quote!(1.0) };
            vec![one]
        } else {
            (0..variants.len())
                .map(|k| if k == i { quote!(1.0) } else { quote!(0.0) })
                .collect()
        };
        quote!(Self::#v => [#(#vals),*],)
    });
    let target_doc = if is_binary {
        " The training target of this class: `[0.0]` for the first class, `[1.0]` for the second."
    } else {
        " The training target of this class: one-hot over the outputs."
    };
    let target_doc = super::doc(target_doc);
    quote! {
        /// The classes of the output, in output order.
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
        pub enum #enum_name {
            #(#defs,)*
        }

        impl #enum_name {
            /// Every class, in output order.
            pub const ALL: [Self; #count] = [#(Self::#variants),*];

            /// The class name as the spec writes it.
            pub const fn name(self) -> &'static str {
                match self {
                    #(#name_arms)*
                }
            }

            /// The class's position in [`Class::ALL`].
            pub const fn index(self) -> usize {
                self as usize
            }

            /// The class at position `index`, if there is one.
            pub fn from_index(index: usize) -> Option<Self> {
                Self::ALL.get(index).copied()
            }

            #target_doc
            pub const fn target(self) -> [Scalar; OUTPUTS] {
                match self {
                    #(#target_arms)*
                }
            }
        }
    }
}

/// `Params::classify`, or nothing without classes.
pub(super) fn classify(cx: &Ctx) -> TokenStream {
    if cx.model.classes.is_none() {
        return TokenStream::new();
    }
    if binary(cx) {
        let (first, second) = match cx.names.classes.as_slice() {
            [a, b] => (ident(a), ident(b)),
            _ => return TokenStream::new(),
        };
        return quote! {
            /// The more likely class and its probability: the second class when the output `a`
            /// is above 0.5 (probability `a`), else the first (probability `1 - a`).
            pub fn classify(&self, x: &[Scalar; INPUTS]) -> (Class, Scalar) {
                let [a] = self.predict(x);
                if a > 0.5 {
                    (Class::#second, a)
                } else {
                    (Class::#first, 1.0 - a)
                }
            }
        };
    }
    let Some(first) = cx.names.classes.first().map(|c| ident(c)) else {
        return TokenStream::new();
    };
    quote! {
        /// The most likely class (the largest output; the first one on a tie) and its
        /// probability.
        pub fn classify(&self, x: &[Scalar; INPUTS]) -> (Class, Scalar) {
            let out = self.predict(x);
            let [first, ..] = out;
            let mut best = (Class::#first, first);
            for (class, &p) in Class::ALL.iter().zip(out.iter()).skip(1) {
                if p > best.1 {
                    best = (*class, p);
                }
            }
            best
        }
    }
}

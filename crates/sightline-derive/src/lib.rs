//! `#[derive(Parameters)]`: a plant's parameters declared once, on its struct's fields.
//!
//! Each field carrying `#[param(...)]` is one parameter. Its name on the command line is the
//! field's name, its meaning the field's doc comment, and the attribute gives the rest:
//!
//! | key | value | required |
//! |---|---|---|
//! | `default` | the default value (an expression; an array literal for `[f64; N]`) | for `Default` |
//! | `unit` | the unit, e.g. `"m/s^2"` (`"-"` when dimensionless) | yes |
//! | `domain` | `Positive`, `NonNegative`, `Finite`, `Interval(lo, hi)`, `Integer(lo, hi)` | yes |
//! | `name` | the command-line name, instead of the field's; `{}` is the 1-based index for arrays | arrays |
//! | `about` | the meaning, instead of the doc comment; `{}` is the 1-based index for arrays | no |
//!
//! Fields may be `f64`, `usize` (with an `Integer` domain) or `[f64; N]` (one parameter per
//! element). Fields without `#[param]` are not parameters. When any field has a `default`, the
//! derive also implements `Default`, with `Default::default()` for fields without one.
//!
//! The generated code names Sightline's core crate as `__sightline_core`, which the prelude
//! provides (`use sightline::prelude::*;` or `use sightline_core::prelude::*;`); a file that
//! does not import the prelude writes `#[parameters(crate = "path::to::sightline_core")]` on
//! the struct.

use proc_macro::TokenStream;
use proc_macro2::TokenStream as Tokens;
use quote::quote;
use syn::spanned::Spanned;
use syn::{Data, DeriveInput, Expr, Fields, LitStr, Type, parse_macro_input};

/// Implements `Parameters` (and `Default`, when defaults are given) from `#[param(...)]`
/// field attributes; see the crate documentation.
#[proc_macro_derive(Parameters, attributes(param, parameters))]
pub fn derive_parameters(input: TokenStream) -> TokenStream {
    let input = parse_macro_input!(input as DeriveInput);
    match expand(&input) {
        Ok(tokens) => tokens.into(),
        Err(e) => e.to_compile_error().into(),
    }
}

/// The shape of a parameter field.
enum Kind {
    Real,
    Whole,
    Array(usize),
}

/// One `#[param(...)]` field.
struct Field {
    ident: syn::Ident,
    kind: Kind,
    default: Option<Expr>,
    unit: LitStr,
    domain: Expr,
    name: Option<LitStr>,
    about: String,
}

fn doc_text(attrs: &[syn::Attribute]) -> String {
    let lines: Vec<String> = attrs
        .iter()
        .filter(|a| a.path().is_ident("doc"))
        .filter_map(|a| match &a.meta {
            syn::Meta::NameValue(nv) => match &nv.value {
                Expr::Lit(syn::ExprLit {
                    lit: syn::Lit::Str(s),
                    ..
                }) => Some(s.value().trim().to_string()),
                _ => None,
            },
            _ => None,
        })
        .collect();
    let text = lines.join(" ");
    let text = text.trim();
    let text = text.strip_suffix('.').unwrap_or(text);
    // A sentence in the docs, a phrase in the listing: "Sample time" reads "sample time" (an
    // initial that starts an acronym or symbol, "E/R", "UA", stays).
    let mut chars = text.chars();
    match (chars.next(), chars.next()) {
        (Some(first), Some(second)) if first.is_uppercase() && second.is_lowercase() => {
            first.to_lowercase().chain(text.chars().skip(1)).collect()
        }
        _ => text.to_string(),
    }
}

fn kind_of(ty: &Type) -> syn::Result<Kind> {
    let scalar = |ty: &Type, name: &str| matches!(ty, Type::Path(p) if p.path.is_ident(name));
    if scalar(ty, "f64") {
        return Ok(Kind::Real);
    }
    if scalar(ty, "usize") {
        return Ok(Kind::Whole);
    }
    if let Type::Array(a) = ty {
        if scalar(&a.elem, "f64") {
            if let Expr::Lit(syn::ExprLit {
                lit: syn::Lit::Int(n),
                ..
            }) = &a.len
            {
                return Ok(Kind::Array(n.base10_parse()?));
            }
        }
    }
    Err(syn::Error::new(
        ty.span(),
        "a parameter field is `f64`, `usize` or `[f64; N]` with a literal N",
    ))
}

fn parse_field(field: &syn::Field) -> syn::Result<Option<Field>> {
    let Some(attr) = field.attrs.iter().find(|a| a.path().is_ident("param")) else {
        return Ok(None);
    };
    let ident = field
        .ident
        .clone()
        .ok_or_else(|| syn::Error::new(field.span(), "parameters are named fields"))?;
    let (mut default, mut unit, mut domain, mut name, mut about) = (None, None, None, None, None);
    attr.parse_nested_meta(|meta| {
        let key = meta
            .path
            .get_ident()
            .map(|i| i.to_string())
            .unwrap_or_default();
        match key.as_str() {
            "default" => default = Some(meta.value()?.parse::<Expr>()?),
            "unit" => unit = Some(meta.value()?.parse::<LitStr>()?),
            "domain" => domain = Some(meta.value()?.parse::<Expr>()?),
            "name" => name = Some(meta.value()?.parse::<LitStr>()?),
            "about" => about = Some(meta.value()?.parse::<LitStr>()?),
            _ => {
                return Err(
                    meta.error("unknown key; expected default, unit, domain, name or about")
                );
            }
        }
        Ok(())
    })?;
    let kind = kind_of(&field.ty)?;
    let missing =
        |what: &str| syn::Error::new(attr.span(), format!("#[param] needs `{what} = ...`"));
    let unit = unit.ok_or_else(|| missing("unit"))?;
    let domain = domain.ok_or_else(|| missing("domain"))?;
    if matches!(kind, Kind::Array(_)) && name.is_none() {
        return Err(syn::Error::new(
            attr.span(),
            "an array parameter needs `name = \"...{}...\"` ({} is the 1-based index)",
        ));
    }
    let about = about
        .map(|a| a.value())
        .unwrap_or_else(|| doc_text(&field.attrs));
    if about.is_empty() {
        return Err(syn::Error::new(
            field.span(),
            "say what the parameter is in a doc comment (or `about = \"...\"`)",
        ));
    }
    Ok(Some(Field {
        ident,
        kind,
        default,
        unit,
        domain,
        name,
        about,
    }))
}

fn crate_path(input: &DeriveInput) -> syn::Result<syn::Path> {
    let mut path: syn::Path = syn::parse_quote!(__sightline_core);
    for attr in input
        .attrs
        .iter()
        .filter(|a| a.path().is_ident("parameters"))
    {
        attr.parse_nested_meta(|meta| {
            if meta.path.is_ident("crate") {
                path = meta.value()?.parse::<LitStr>()?.parse()?;
                Ok(())
            } else {
                Err(meta.error("expected `crate = \"path\"`"))
            }
        })?;
    }
    Ok(path)
}

fn expand(input: &DeriveInput) -> syn::Result<Tokens> {
    let core = crate_path(input)?;
    let ty = &input.ident;
    // Names the plant in errors until the command line, which knows its declared name, does.
    let type_name = ty.to_string();
    let (impl_generics, ty_generics, where_clause) = input.generics.split_for_impl();
    let Data::Struct(data) = &input.data else {
        return Err(syn::Error::new(
            input.span(),
            "#[derive(Parameters)] is for structs",
        ));
    };
    let mut fields = Vec::new();
    for f in &data.fields {
        if let Some(p) = parse_field(f)? {
            fields.push(p);
        }
    }

    // One (command-line name, meaning, value read, assignment) per parameter.
    let mut entries = Vec::new();
    for f in &fields {
        let ident = &f.ident;
        let unit = &f.unit;
        let domain = &f.domain;
        let domain = quote!({
            #[allow(unused_imports)]
            use #core::params::Domain::*;
            #domain
        });
        let mut push = |name: String, about: String, read: Tokens, write: Tokens| {
            entries.push((name, about, read, write, unit.clone(), domain.clone()));
        };
        match f.kind {
            Kind::Real => push(
                f.name.as_ref().map_or(ident.to_string(), LitStr::value),
                f.about.clone(),
                quote!(self.#ident),
                quote!(self.#ident = value),
            ),
            // Validated as a whole number in its `Integer` domain before the conversion.
            Kind::Whole => push(
                f.name.as_ref().map_or(ident.to_string(), LitStr::value),
                f.about.clone(),
                quote!(self.#ident as f64),
                quote!(self.#ident = value as usize),
            ),
            Kind::Array(n) => {
                let pattern = f.name.as_ref().map(LitStr::value).unwrap_or_default();
                for i in 0..n {
                    let number = (i + 1).to_string();
                    push(
                        pattern.replace("{}", &number),
                        f.about.replace("{}", &number),
                        quote!(self.#ident[#i]),
                        quote!(self.#ident[#i] = value),
                    );
                }
            }
        }
    }
    let mut seen = std::collections::HashSet::new();
    for (name, ..) in &entries {
        if !seen.insert(name.clone()) {
            return Err(syn::Error::new(
                input.span(),
                format!("two parameters are named '{name}'"),
            ));
        }
    }
    let listed = entries.iter().map(|(name, about, read, _, unit, domain)| {
        quote! {
            #core::params::Parameter {
                name: ::std::borrow::Cow::Borrowed(#name),
                value: #read,
                unit: ::std::borrow::Cow::Borrowed(#unit),
                about: ::std::borrow::Cow::Borrowed(#about),
                domain: #domain,
            }
        }
    });
    let arms = entries
        .iter()
        .map(|(name, _, _, write, ..)| quote!(#name => #write,));
    let names: Vec<&String> = entries.iter().map(|e| &e.0).collect();
    let valid = names
        .iter()
        .map(|n| n.as_str())
        .collect::<Vec<_>>()
        .join(", ");
    let list = if entries.is_empty() {
        quote!(::std::vec::Vec::new())
    } else {
        quote!(::std::vec![#(#listed),*])
    };
    let set_body = if entries.is_empty() {
        quote! {
            #core::params::validate(#type_name, &[], name, value).map(|_| ())
        }
    } else {
        quote! {
            let params = #core::params::Parameters::parameters(self);
            #core::params::validate(#type_name, &params, name, value)?;
            match name {
                #(#arms)*
                _ => {
                    return ::std::result::Result::Err(#core::ParamError::Unknown {
                        model: #type_name.to_string(),
                        name: name.to_string(),
                        valid: #valid.to_string(),
                    })
                }
            }
            ::std::result::Result::Ok(())
        }
    };
    let parameters_impl = quote! {
        impl #impl_generics #core::params::Parameters for #ty #ty_generics #where_clause {
            fn parameters(&self) -> ::std::vec::Vec<#core::params::Parameter> {
                #list
            }
            fn set_parameter(
                &mut self,
                name: &str,
                value: f64,
            ) -> ::std::result::Result<(), #core::ParamError> {
                #set_body
            }
        }
    };

    let default_impl = if fields.iter().any(|f| f.default.is_some()) {
        let inits = data.fields.iter().enumerate().map(|(i, f)| {
            let value = fields
                .iter()
                .find(|p| Some(&p.ident) == f.ident.as_ref())
                .and_then(|p| p.default.as_ref())
                .map_or(quote!(::std::default::Default::default()), |d| quote!(#d));
            match &f.ident {
                Some(ident) => quote!(#ident: #value),
                None => {
                    let index = syn::Index::from(i);
                    quote!(#index: #value)
                }
            }
        });
        let build = match &data.fields {
            Fields::Unit => quote!(#ty),
            _ => quote!(#ty { #(#inits),* }),
        };
        quote! {
            impl #impl_generics ::std::default::Default for #ty #ty_generics #where_clause {
                fn default() -> Self {
                    #build
                }
            }
        }
    } else {
        Tokens::new()
    };
    Ok(quote! {
        #parameters_impl
        #default_impl
    })
}

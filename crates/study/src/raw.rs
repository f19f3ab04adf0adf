//! The study file as written: serde structures with spans, before any check.

use serde::de::{self, Deserializer, SeqAccess, Visitor};
use serde::Deserialize;
use std::fmt;
use toml::Spanned;

/// One name or a list of names.
#[derive(Clone, Debug, PartialEq, Eq)]
pub(crate) struct Names(pub Vec<String>);

impl<'de> Deserialize<'de> for Names {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Names;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a variable name or a list of variable names")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<Names, E> {
                Ok(Names(vec![v.to_string()]))
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Names, A::Error> {
                let mut out = Vec::new();
                while let Some(s) = seq.next_element::<String>()? {
                    out.push(s);
                }
                Ok(Names(out))
            }
        }
        d.deserialize_any(V)
    }
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawStudy {
    pub study: Option<RawHeader>,
    pub source: Option<Spanned<RawSource>>,
    pub diagram: Spanned<RawDiagram>,
    #[serde(default)]
    pub question: Vec<Spanned<RawQuestion>>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawHeader {
    pub name: Option<String>,
    pub description: Option<String>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawSource {
    pub database: Option<Spanned<String>>,
    pub table: Option<Spanned<String>>,
    pub query: Option<Spanned<String>>,
    pub file: Option<Spanned<String>>,
    pub filter: Option<Spanned<String>>,
    pub unit: Option<Spanned<String>>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawDiagram {
    pub text: Option<Spanned<String>>,
    pub file: Option<Spanned<String>>,
}

#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawQuestion {
    pub name: Option<Spanned<String>>,
    pub treatment: Spanned<Names>,
    pub outcome: Spanned<Names>,
    pub estimand: Option<Spanned<String>>,
    pub segments: Option<Spanned<Names>>,
    pub method: Option<Spanned<String>>,
    pub adjust: Option<Spanned<Names>>,
    pub mediators: Option<Spanned<Names>>,
    pub instruments: Option<Spanned<Names>>,
    pub instrument_given: Option<Spanned<Names>>,
    pub unit: Option<Spanned<String>>,
}

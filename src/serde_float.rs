//! A serde representation of `f64` values that may be infinite, for the few
//! documented fields that can hold one (a t statistic of an exact fit, an
//! undetermined cross-validation score): finite numbers are written as
//! numbers, and `+inf`, `-inf` and NaN as the strings `"inf"`, `"-inf"` and
//! `"NaN"`. JSON has no numbers for them, and `serde_json` would write
//! `null` and then fail to read it back; with this representation every
//! value round-trips exactly.

use std::fmt;

use serde::de::{self, Deserializer, SeqAccess, Visitor};
use serde::ser::{SerializeSeq, Serializer};

fn write<S: Serializer>(v: f64, s: S) -> Result<S::Ok, S::Error> {
    if v.is_finite() {
        s.serialize_f64(v)
    } else if v.is_nan() {
        s.serialize_str("NaN")
    } else if v > 0.0 {
        s.serialize_str("inf")
    } else {
        s.serialize_str("-inf")
    }
}

struct FloatVisitor;

impl Visitor<'_> for FloatVisitor {
    type Value = f64;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a number or one of \"inf\", \"-inf\", \"NaN\"")
    }

    fn visit_f64<E: de::Error>(self, v: f64) -> Result<f64, E> {
        Ok(v)
    }

    fn visit_i64<E: de::Error>(self, v: i64) -> Result<f64, E> {
        Ok(v as f64)
    }

    fn visit_u64<E: de::Error>(self, v: u64) -> Result<f64, E> {
        Ok(v as f64)
    }

    fn visit_str<E: de::Error>(self, v: &str) -> Result<f64, E> {
        match v {
            "inf" => Ok(f64::INFINITY),
            "-inf" => Ok(f64::NEG_INFINITY),
            "NaN" => Ok(f64::NAN),
            other => Err(E::invalid_value(de::Unexpected::Str(other), &self)),
        }
    }
}

/// One `f64` (use as `#[serde(with = "crate::serde_float::float")]`).
pub(crate) mod float {
    use super::*;

    pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        write(*v, s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        d.deserialize_any(FloatVisitor)
    }
}

struct Element(f64);

impl serde::Serialize for Element {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        write(self.0, s)
    }
}

impl<'de> serde::Deserialize<'de> for Element {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        d.deserialize_any(FloatVisitor).map(Element)
    }
}

fn write_seq<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
    let mut seq = s.serialize_seq(Some(v.len()))?;
    for &x in v {
        seq.serialize_element(&Element(x))?;
    }
    seq.end()
}

struct SeqVisitor;

impl<'de> Visitor<'de> for SeqVisitor {
    type Value = Vec<f64>;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a sequence of numbers")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Vec<f64>, A::Error> {
        // Grow as elements arrive: a length hint is untrusted input.
        let mut out = Vec::new();
        while let Some(Element(v)) = seq.next_element()? {
            out.push(v);
        }
        Ok(out)
    }
}

/// A `Vec<f64>` (use as `#[serde(with = "crate::serde_float::floats")]`).
pub(crate) mod floats {
    use super::*;

    pub fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
        write_seq(v, s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        d.deserialize_seq(SeqVisitor)
    }
}

/// An `Option<Vec<f64>>`.
pub(crate) mod option_floats {
    use super::*;

    #[derive(serde::Serialize, serde::Deserialize)]
    #[serde(transparent)]
    struct Wrapped(#[serde(with = "super::floats")] Vec<f64>);

    pub fn serialize<S: Serializer>(v: &Option<Vec<f64>>, s: S) -> Result<S::Ok, S::Error> {
        match v {
            Some(v) => s.serialize_some(&Wrapped(v.clone())),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<Vec<f64>>, D::Error> {
        let w: Option<Wrapped> = serde::Deserialize::deserialize(d)?;
        Ok(w.map(|w| w.0))
    }
}

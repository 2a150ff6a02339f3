//! The crate's serde representation of `f64` values and arrays of them.
//!
//! **Numbers are written as strings.** Every `f64` of a saved model,
//! report or setting is written as a JSON string holding the shortest
//! decimal that Rust's `str::parse::<f64>` reads back to the same bits
//! (`"0.1"`, `"-2.5"`, `"1e-300"`, `"-0"`); `+inf`, `-inf` and NaN, which
//! only the documented fields can hold, as `"inf"`, `"-inf"` and `"NaN"`.
//! The round trip is then exact for every `f64` whatever JSON reader is
//! used: `serde_json` without its `float_roundtrip` feature misreads
//! about three in ten of the numbers it writes itself by one unit in the
//! last place (measured on a million random bit patterns), so a saved
//! number would not come back as it was.
//!
//! On the way in a plain JSON number is accepted too (for hand-written
//! files); it is then exactly what the JSON reader made of it. A string
//! that is not a decimal, or a decimal beyond the range of `f64` (`"1e400"`),
//! is an error.
//!
//! Arrays are plain lists: a vector is a list of numbers, a matrix a list
//! of its rows (an empty list is the `0 x 0` matrix). No array crate's
//! internal layout appears in the saved form.

use std::fmt;

use ndarray::{Array1, Array2};
use serde::de::{self, Deserializer, SeqAccess, Visitor};
use serde::ser::{SerializeSeq, Serializer};
use serde::{Deserialize, Serialize};

/// The shortest decimal of a finite `v` that parses back to the same bits:
/// positional between `1e-5` and `1e16`, with an exponent otherwise.
pub(crate) fn shortest(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 || (1e-5..1e16).contains(&a) {
        format!("{v}")
    } else {
        format!("{v:e}")
    }
}

fn write<S: Serializer>(v: f64, s: S) -> Result<S::Ok, S::Error> {
    if v.is_finite() {
        s.serialize_str(&shortest(v))
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
        f.write_str(
            "a decimal number as a string (or a number), or one of \"inf\", \"-inf\", \"NaN\"",
        )
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
            "inf" => return Ok(f64::INFINITY),
            "-inf" => return Ok(f64::NEG_INFINITY),
            "NaN" => return Ok(f64::NAN),
            _ => {}
        }
        match v.parse::<f64>() {
            // Rust also reads "infinity", "nan" and decimals beyond the
            // range (as infinities): only the three spellings above may
            // stand for a non-finite value.
            Ok(x) if x.is_finite() => Ok(x),
            _ => Err(E::invalid_value(de::Unexpected::Str(v), &self)),
        }
    }
}

/// One `f64` as a serde value.
struct Element(f64);

impl Serialize for Element {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        write(self.0, s)
    }
}

impl<'de> Deserialize<'de> for Element {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        d.deserialize_any(FloatVisitor).map(Element)
    }
}

/// A list of `f64` for writing.
struct Elements<I>(I);

impl<I: Iterator<Item = f64> + Clone> Serialize for Elements<I> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let items = self.0.clone();
        let mut seq = s.serialize_seq(None)?;
        for x in items {
            seq.serialize_element(&Element(x))?;
        }
        seq.end()
    }
}

/// A list of `f64` read back.
struct List(Vec<f64>);

impl<'de> Deserialize<'de> for List {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct SeqVisitor;
        impl<'de> Visitor<'de> for SeqVisitor {
            type Value = Vec<f64>;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a list of numbers")
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
        d.deserialize_seq(SeqVisitor).map(List)
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

/// An `Option<f64>` (`null` for `None`).
pub(crate) mod option_float {
    use super::*;

    pub fn serialize<S: Serializer>(v: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
        match v {
            Some(v) => s.serialize_some(&Element(*v)),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
        Ok(Option::<Element>::deserialize(d)?.map(|e| e.0))
    }
}

/// A `Vec<f64>` as a list.
pub(crate) mod floats {
    use super::*;

    pub fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
        Elements(v.iter().copied()).serialize(s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        Ok(List::deserialize(d)?.0)
    }
}

/// An `Option<Vec<f64>>` (`null` for `None`).
pub(crate) mod option_floats {
    use super::*;

    pub fn serialize<S: Serializer>(v: &Option<Vec<f64>>, s: S) -> Result<S::Ok, S::Error> {
        match v {
            Some(v) => s.serialize_some(&Elements(v.iter().copied())),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<Vec<f64>>, D::Error> {
        Ok(Option::<List>::deserialize(d)?.map(|l| l.0))
    }
}

/// A `Vec<Option<f64>>` as a list with `null` for `None`.
pub(crate) mod floats_or_none {
    use super::*;

    pub fn serialize<S: Serializer>(v: &[Option<f64>], s: S) -> Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(v.len()))?;
        for x in v {
            seq.serialize_element(&x.map(Element))?;
        }
        seq.end()
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<Option<f64>>, D::Error> {
        struct SeqVisitor;
        impl<'de> Visitor<'de> for SeqVisitor {
            type Value = Vec<Option<f64>>;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a list of numbers or nulls")
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Self::Value, A::Error> {
                let mut out = Vec::new();
                while let Some(v) = seq.next_element::<Option<Element>>()? {
                    out.push(v.map(|e| e.0));
                }
                Ok(out)
            }
        }
        d.deserialize_seq(SeqVisitor)
    }
}

/// An `Array1<f64>` as a plain list.
pub(crate) mod array1 {
    use super::*;

    pub fn serialize<S: Serializer>(v: &Array1<f64>, s: S) -> Result<S::Ok, S::Error> {
        Elements(v.iter().copied()).serialize(s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Array1<f64>, D::Error> {
        Ok(Array1::from(List::deserialize(d)?.0))
    }
}

/// Rows of a matrix borrowed for writing.
struct Rows<'a>(&'a Array2<f64>);

impl Serialize for Rows<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(self.0.nrows()))?;
        for row in self.0.rows() {
            seq.serialize_element(&Elements(row.iter().copied()))?;
        }
        seq.end()
    }
}

/// A matrix read back as a list of rows of equal length.
struct Matrix(Array2<f64>);

impl<'de> Deserialize<'de> for Matrix {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct RowsVisitor;
        impl<'de> Visitor<'de> for RowsVisitor {
            type Value = Array2<f64>;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a list of rows of equal length")
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Self::Value, A::Error> {
                let mut data = Vec::new();
                let mut rows = 0usize;
                let mut width = None;
                while let Some(List(row)) = seq.next_element()? {
                    match width {
                        None => width = Some(row.len()),
                        Some(w) if w != row.len() => {
                            return Err(de::Error::invalid_length(
                                row.len(),
                                &"a row as long as the first row",
                            ))
                        }
                        Some(_) => {}
                    }
                    data.extend(row);
                    rows += 1;
                }
                Array2::from_shape_vec((rows, width.unwrap_or(0)), data)
                    .map_err(|_| de::Error::custom("rows of unequal length"))
            }
        }
        d.deserialize_seq(RowsVisitor).map(Matrix)
    }
}

/// An `Array2<f64>` as a list of its rows.
pub(crate) mod array2 {
    use super::*;

    pub fn serialize<S: Serializer>(v: &Array2<f64>, s: S) -> Result<S::Ok, S::Error> {
        Rows(v).serialize(s)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Array2<f64>, D::Error> {
        Ok(Matrix::deserialize(d)?.0)
    }
}

/// An `Option<Array2<f64>>` (`null` for `None`).
pub(crate) mod option_array2 {
    use super::*;

    pub fn serialize<S: Serializer>(v: &Option<Array2<f64>>, s: S) -> Result<S::Ok, S::Error> {
        match v {
            Some(v) => s.serialize_some(&Rows(v)),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<Array2<f64>>, D::Error> {
        Ok(Option::<Matrix>::deserialize(d)?.map(|m| m.0))
    }
}

/// The format tag and version at the head of a saved form.
pub(crate) fn check_tag(
    what: &'static str,
    expected: &'static str,
    supported: u32,
    found: &str,
    version: u64,
) -> crate::Result<()> {
    if found != expected || version != u64::from(supported) {
        return Err(crate::Error::SavedFormat {
            what,
            expected,
            supported,
            found: found.to_string(),
            version,
        });
    }
    Ok(())
}

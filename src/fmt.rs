//! How numbers and columns are written in messages.

use std::fmt;

/// A number for a message: up to six significant digits between `1e-4`
/// and `1e6` (`0.1`, `2.5`, `12.3457`), otherwise four significant
/// digits in scientific form (`2.824e9`, `1e-12`); trailing zeros dropped.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Num(pub f64);

impl fmt::Display for Num {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let v = self.0;
        if v.is_nan() {
            return f.write_str("NaN");
        }
        if v.is_infinite() {
            return f.write_str(if v > 0.0 { "inf" } else { "-inf" });
        }
        if v == 0.0 {
            return f.write_str("0");
        }
        let a = v.abs();
        if (1e-4..1e6).contains(&a) {
            let decimals = (5 - a.log10().floor() as i32).clamp(0, 9) as usize;
            let s = format!("{v:.decimals$}");
            let s = if s.contains('.') {
                s.trim_end_matches('0').trim_end_matches('.')
            } else {
                &s
            };
            f.write_str(s)
        } else {
            let s = format!("{v:.3e}");
            let (mantissa, exp) = s.split_once('e').unwrap_or((&s, "0"));
            let mantissa = if mantissa.contains('.') {
                mantissa.trim_end_matches('0').trim_end_matches('.')
            } else {
                mantissa
            };
            write!(f, "{mantissa}e{exp}")
        }
    }
}

/// A column for a message: `column 3` or `column 3 ("humidity")`; the
/// messages say once that columns count from 0.
pub(crate) fn column(index: usize, name: Option<&str>) -> String {
    match name {
        Some(n) => format!("column {index} ({n:?})"),
        None => format!("column {index}"),
    }
}

/// "column 3 ("rain") is a combination of columns 0 ("wind") and 2 ("sun");
/// column 4 is constant beside the intercept", from the dependent columns
/// and, for each, the independent columns it combines.
pub(crate) fn dependence(
    dependent: &[usize],
    combinations: &[Vec<usize>],
    names: Option<&[String]>,
) -> String {
    let name = |j: usize| names.and_then(|n| n.get(j)).map(String::as_str);
    let mut parts = Vec::with_capacity(dependent.len());
    for (k, &j) in dependent.iter().enumerate() {
        let what = column(j, name(j));
        let known = combinations.len() == dependent.len();
        let part = match combinations.get(k).filter(|_| known) {
            None => format!("{what} depends on other columns"),
            Some(list) if list.is_empty() => {
                format!("{what} is constant beside the intercept (or zero)")
            }
            Some(list) => {
                let others: Vec<String> = list
                    .iter()
                    .map(|&i| match name(i) {
                        Some(n) => format!("{i} ({n:?})"),
                        None => i.to_string(),
                    })
                    .collect();
                let joined = match others.split_last() {
                    Some((last, [])) => format!("column {last}"),
                    Some((last, rest)) => format!("columns {} and {last}", rest.join(", ")),
                    None => String::new(),
                };
                format!("{what} is a combination of {joined}")
            }
        };
        parts.push(part);
    }
    if parts.is_empty() {
        "no column was singled out".to_string()
    } else {
        parts.join("; ")
    }
}

#[cfg(test)]
mod tests {
    use super::Num;

    #[test]
    fn numbers_read_as_people_write_them() {
        let cases = [
            (0.1, "0.1"),
            (1e-1, "0.1"),
            (2.824036625785946e9, "2.824e9"),
            (2.5, "2.5"),
            (123456.789, "123457"),
            (12.345678, "12.3457"),
            (1e-12, "1e-12"),
            (4.440892098500626e-16, "4.441e-16"),
            (-3.0, "-3"),
            (0.0, "0"),
            (f64::INFINITY, "inf"),
            (f64::NAN, "NaN"),
            (1e6, "1e6"),
            (0.0001, "0.0001"),
        ];
        for (v, want) in cases {
            assert_eq!(Num(v).to_string(), want, "{v:e}");
        }
    }
}

//! The options string of `lsq_fit_with`: space- or comma-separated
//! `key=value` settings.

use std::fmt;

/// Which mergeable state a fit accumulates (see [`leastline::state`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum StateKind {
    /// [`leastline::TriangleState`]: the accuracy of QR (the default).
    Triangle,
    /// [`leastline::CrossProductState`]: cheaper updates, the accuracy of
    /// the normal equations.
    CrossProduct,
}

/// The settings of one fit aggregate call.
///
/// Written as a string literal of `key=value` settings separated by spaces
/// or commas, keys in any order, each at most once:
///
/// - `intercept=yes|no` (default `yes`);
/// - `ridge=<lambda>`, a finite penalty `>= 0` (default: none, an
///   unpenalised fit); only with the triangle state;
/// - `state=triangle|cross-product` (default `triangle`).
///
/// ```
/// use leastline_engine::{FitOptions, StateKind};
/// let o = FitOptions::parse("intercept=no, ridge=0.5")?;
/// assert!(!o.intercept);
/// assert_eq!(o.ridge, Some(0.5));
/// assert_eq!(o.state, StateKind::Triangle);
/// # Ok::<(), leastline_engine::OptionsError>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitOptions {
    /// Whether an intercept is fitted.
    pub intercept: bool,
    /// The ridge penalty, if any.
    pub ridge: Option<f64>,
    /// The state accumulated.
    pub state: StateKind,
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions {
            intercept: true,
            ridge: None,
            state: StateKind::Triangle,
        }
    }
}

/// What was wrong with an options string.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum OptionsError {
    /// A setting that is not `key=value`.
    #[error("option {position} ({text:?}) is not of the form key=value")]
    Malformed {
        /// Position of the setting (counting from 0).
        position: usize,
        /// The setting as written.
        text: String,
    },
    /// A key this function does not know.
    #[error("unknown option {key:?} (known: intercept, ridge, state)")]
    UnknownKey {
        /// The key as written.
        key: String,
    },
    /// A key given twice.
    #[error("option {key:?} is given twice")]
    Repeated {
        /// The key.
        key: String,
    },
    /// A value the key does not accept.
    #[error("option {key}={value:?} is invalid: {expected}")]
    BadValue {
        /// The key.
        key: &'static str,
        /// The value as written.
        value: String,
        /// What the key accepts.
        expected: &'static str,
    },
    /// Settings that cannot go together.
    #[error("options {0}")]
    Conflict(&'static str),
}

impl FitOptions {
    /// Parses an options string (an empty string gives the defaults).
    ///
    /// # Errors
    /// [`OptionsError`] naming the setting that is malformed, unknown,
    /// repeated, out of range, or in conflict with another.
    pub fn parse(text: &str) -> Result<Self, OptionsError> {
        let mut o = FitOptions::default();
        let mut seen: Vec<&'static str> = Vec::new();
        let settings = text
            .split(|c: char| c == ',' || c.is_whitespace())
            .filter(|s| !s.is_empty());
        for (position, setting) in settings.enumerate() {
            let Some((key, value)) = setting.split_once('=') else {
                return Err(OptionsError::Malformed {
                    position,
                    text: setting.to_string(),
                });
            };
            let key: &'static str = match key.to_ascii_lowercase().as_str() {
                "intercept" => "intercept",
                "ridge" => "ridge",
                "state" => "state",
                _ => {
                    return Err(OptionsError::UnknownKey {
                        key: key.to_string(),
                    })
                }
            };
            if seen.contains(&key) {
                return Err(OptionsError::Repeated {
                    key: key.to_string(),
                });
            }
            seen.push(key);
            let bad = |expected| OptionsError::BadValue {
                key,
                value: value.to_string(),
                expected,
            };
            match key {
                "intercept" => {
                    o.intercept = match value.to_ascii_lowercase().as_str() {
                        "yes" | "true" | "on" => true,
                        "no" | "false" | "off" => false,
                        _ => return Err(bad("yes or no")),
                    }
                }
                "ridge" => {
                    let lambda: f64 = value.parse().map_err(|_| bad("a number"))?;
                    if !lambda.is_finite() || lambda < 0.0 {
                        return Err(bad("a finite number >= 0"));
                    }
                    o.ridge = Some(lambda);
                }
                _ => {
                    o.state = match value.to_ascii_lowercase().as_str() {
                        "triangle" => StateKind::Triangle,
                        "cross-product" | "cross" => StateKind::CrossProduct,
                        _ => return Err(bad("triangle or cross-product")),
                    }
                }
            }
        }
        if o.ridge.is_some() && o.state == StateKind::CrossProduct {
            return Err(OptionsError::Conflict(
                "ridge and state=cross-product: the ridge finish needs the triangle state",
            ));
        }
        Ok(o)
    }
}

impl fmt::Display for FitOptions {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "intercept={} state={}",
            if self.intercept { "yes" } else { "no" },
            match self.state {
                StateKind::Triangle => "triangle",
                StateKind::CrossProduct => "cross-product",
            }
        )?;
        if let Some(l) = self.ridge {
            write!(f, " ridge={l:e}")?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn settings_parse_and_round_trip_through_display() {
        let o = FitOptions::parse(" state=cross-product,intercept=off ").unwrap();
        assert_eq!(o.state, StateKind::CrossProduct);
        assert!(!o.intercept);
        assert_eq!(FitOptions::parse(&o.to_string()).unwrap(), o);
        let r = FitOptions::parse("ridge=2.5e-3").unwrap();
        assert_eq!(FitOptions::parse(&r.to_string()).unwrap(), r);
        assert_eq!(FitOptions::parse("").unwrap(), FitOptions::default());
    }

    #[test]
    fn bad_settings_are_named() {
        let cases = [
            ("ridge", "option 0"),
            ("weights=w", "unknown option \"weights\""),
            ("ridge=1 ridge=2", "given twice"),
            ("ridge=-1", "ridge=\"-1\""),
            ("ridge=nan", "finite"),
            ("intercept=maybe", "yes or no"),
            ("state=sphere", "triangle or cross-product"),
            ("ridge=1 state=cross", "needs the triangle"),
        ];
        for (text, expected) in cases {
            let e = FitOptions::parse(text).unwrap_err().to_string();
            assert!(e.contains(expected), "{text}: {e}");
        }
    }
}

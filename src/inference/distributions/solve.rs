//! A safeguarded Newton iteration for quantiles, on the logarithm of a
//! probability against the logarithm of the argument.
//!
//! Solving `ln g(x) = ln target` in `u = ln x` makes the steps relative
//! (the quantile gets a relative accuracy wherever it lies, from `1e-300`
//! to `1e300`) and makes heavy tails, where `ln g` is nearly linear in
//! `ln x`, almost exactly linear problems. Every step is kept inside a
//! bracket that holds the root: a Newton step that leaves it is replaced by
//! a geometric bisection, and until both ends are known the bracket is
//! widened by doubling steps in `u`. Once the iteration has converged, a
//! short walk over neighbouring doubles picks the one whose probability is
//! nearest the target (this matters where the distribution is nearly a
//! step, at enormous degrees of freedom). Every loop has a hard cap.

use crate::error::{Error, Result};

/// Hard cap on Newton and bisection evaluations: bracketing the whole
/// double range by doubling steps takes at most 11, bisecting it down to
/// Newton's domain about 60.
const MAX_EVALUATIONS: usize = 200;
/// Hard cap on the final walk over neighbouring doubles.
const MAX_WALK: usize = 16;
/// Relative accuracy assumed of the logarithm of a probability (about 10
/// times the worst measured), scaled by `max(1, |ln p| / 100)`: a Newton
/// step within what this error allows is the last one.
const LN_PROBABILITY_NOISE: f64 = 1e-13;

/// Where the root lies.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum Root {
    /// A finite, positive, normal double.
    At(f64),
    /// Beyond `f64::MAX`.
    Above,
    /// Below the smallest positive normal double.
    Below,
}

impl Root {
    /// The root as a quantile: below the smallest normal double it is
    /// returned as 0; beyond the largest, `what` names the overflow.
    pub(super) fn value(self, what: &'static str) -> Result<f64> {
        match self {
            Root::At(x) => Ok(x),
            Root::Below => Ok(0.0),
            Root::Above => Err(Error::Overflow { what }),
        }
    }
}

/// Solve `ln g(x) = ln_target` for `x > 0`, where `eval(x)` returns
/// `(ln g(x), d ln g / d ln x)` and `g` is increasing (`increasing`) or
/// decreasing in `x`.
pub(super) fn solve<F>(
    mut eval: F,
    ln_target: f64,
    increasing: bool,
    start: f64,
    what: &'static str,
) -> Result<Root>
where
    F: FnMut(f64) -> Result<(f64, f64)>,
{
    const X_MIN: f64 = f64::MIN_POSITIVE;
    const X_MAX: f64 = f64::MAX;
    let mut psi_at = |x: f64| -> Result<(f64, f64)> {
        let (ln_g, slope) = eval(x)?;
        if ln_g.is_nan() {
            return Err(Error::NoConvergence {
                what: "quantile iteration (a probability was not a number)",
            });
        }
        Ok((ln_g - ln_target, slope))
    };
    let mut x = if start.is_finite() && start > 0.0 {
        start.clamp(X_MIN, X_MAX)
    } else {
        1.0
    };
    let mut lo: Option<f64> = None;
    let mut hi: Option<f64> = None;
    let mut best = (f64::INFINITY, x);
    let mut widen = 1.0f64;
    let noise = LN_PROBABILITY_NOISE * (ln_target.abs() / 100.0).max(1.0);
    // |psi| before the last Newton step, to see whether that step helped.
    let mut before_newton: Option<f64> = None;
    let mut finished = None;
    for _ in 0..MAX_EVALUATIONS {
        let (psi, slope) = psi_at(x)?;
        if psi.abs() < best.0 {
            best = (psi.abs(), x);
        }
        if psi == 0.0 {
            return Ok(Root::At(x));
        }
        let too_small = (psi < 0.0) == increasing;
        if too_small {
            if x >= X_MAX {
                return Ok(Root::Above);
            }
            lo = Some(x);
        } else {
            if x <= X_MIN {
                return Ok(Root::Below);
            }
            hi = Some(x);
        }
        let du = if psi.is_finite() && slope.is_finite() && slope != 0.0 {
            -psi / slope
        } else {
            f64::NAN
        };
        let newton = if du.is_finite() {
            x * du.clamp(-64.0, 64.0).exp()
        } else {
            f64::NAN
        };
        let inside = match (lo, hi) {
            (Some(l), Some(h)) => newton > l && newton < h,
            (Some(l), None) => newton > l && newton.is_finite(),
            (None, Some(h)) => newton < h && newton > 0.0,
            (None, None) => newton.is_finite() && newton > 0.0,
        };
        // The last Newton step: within what the noise in ln g allows (its
        // quadratic error is then far below rounding) or below rounding.
        let last_step = (4.0 * f64::EPSILON).max(noise / slope.abs());
        if du.abs() <= last_step {
            finished = Some(if inside { newton } else { x });
            break;
        }
        // A Newton step that did not halve |psi| is not trusted again (the
        // slope, a ratio of two probabilities, is inaccurate far out where
        // both are astronomically small): bisect or widen instead.
        let progressing = before_newton.is_none_or(|b| psi.abs() <= 0.5 * b);
        let use_newton = inside && progressing;
        let next = match (lo, hi) {
            (Some(l), Some(h)) => {
                if h / l - 1.0 <= 4.0 * f64::EPSILON {
                    finished = Some(best.1);
                    break;
                }
                if use_newton {
                    newton
                } else {
                    geometric_mid(l, h)
                }
            }
            (Some(l), None) if !use_newton => {
                widen *= 2.0;
                l * widen.min(700.0).exp()
            }
            (None, Some(h)) if !use_newton => {
                widen *= 2.0;
                h * (-widen.min(700.0)).exp()
            }
            _ => newton,
        };
        before_newton = use_newton.then_some(psi.abs());
        x = next.clamp(X_MIN, X_MAX);
    }
    let Some(candidate) = finished else {
        return Err(Error::NoConvergence { what });
    };
    Ok(Root::At(walk(&mut psi_at, candidate, increasing)?))
}

/// From a converged candidate, step over neighbouring doubles towards the
/// root while the distance `|ln g - ln target|` shrinks.
fn walk<F>(psi_at: &mut F, x: f64, increasing: bool) -> Result<f64>
where
    F: FnMut(f64) -> Result<(f64, f64)>,
{
    let (psi, _) = psi_at(x)?;
    if psi == 0.0 {
        return Ok(x);
    }
    let up = (psi < 0.0) == increasing;
    let (mut best_x, mut best_psi) = (x, psi.abs());
    let mut current = x;
    for _ in 0..MAX_WALK {
        let next = if up {
            current.next_up()
        } else {
            current.next_down()
        };
        if !(next.is_finite() && next >= f64::MIN_POSITIVE) {
            break;
        }
        let (psi_next, _) = psi_at(next)?;
        if psi_next.abs() < best_psi {
            best_x = next;
            best_psi = psi_next.abs();
        }
        // Crossed the root, or no longer getting closer: stop.
        if (psi_next < 0.0) != (psi < 0.0) || psi_next.abs() >= best_psi && best_x != next {
            break;
        }
        current = next;
    }
    Ok(best_x)
}

/// `sqrt(l h)` without overflow or underflow; the arithmetic midpoint
/// once `h < 2 l`, where the two agree to first order and the logarithms
/// would no longer resolve a narrow bracket.
fn geometric_mid(l: f64, h: f64) -> f64 {
    if h < 2.0 * l {
        l + 0.5 * (h - l)
    } else {
        (0.5 * (l.ln() + h.ln())).exp()
    }
}

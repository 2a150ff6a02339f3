//! Plain-text summaries (our own layout).
//!
//! An [`Inference`] prints a heading line, one line per parameter in the
//! form `name = value +/- std error`, followed by `t`, `p` and the interval,
//! then one labelled line each for the noise level, R^2, the overall test,
//! the likelihood criteria and collinearity.

use std::fmt;

use super::{Diagnostics, Estimate, Inference};

/// Six significant digits, fixed notation between 1e-3 and 1e6.
fn num(v: f64) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    if v == 0.0 {
        return "0".to_string();
    }
    let a = v.abs();
    if (1e-3..1e6).contains(&a) {
        let decimals = (5 - a.log10().floor() as i32).max(0) as usize;
        format!("{v:.decimals$}")
    } else {
        format!("{v:.5e}")
    }
}

/// `p = 0.0312`, `p = 3.2e-9`, or a bound `p < 1e-300` where the tail
/// probability is below the range where it keeps its digits (a printed 0
/// would read as exactly zero).
fn prob(p: f64) -> String {
    if p < 1e-300 {
        "p < 1e-300".to_string()
    } else if p < 1e-4 {
        format!("p = {p:.2e}")
    } else {
        format!("p = {p:.4}")
    }
}

fn level_percent(level: f64) -> String {
    let pct = 100.0 * level;
    if (pct - pct.round()).abs() < 1e-9 {
        format!("{}%", pct.round())
    } else {
        format!("{pct}%")
    }
}

fn estimate_line(
    f: &mut fmt::Formatter<'_>,
    name: &str,
    width: usize,
    e: &Estimate,
) -> fmt::Result {
    writeln!(
        f,
        "  {name:<width$} = {:>12} +/- {:<12}  t = {:>8}  {:<13}  within [{}, {}]",
        num(e.value),
        num(e.std_error),
        format!("{:.3}", e.t),
        prob(e.p_value),
        num(e.lower),
        num(e.upper),
    )
}

impl fmt::Display for Inference {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "Least-squares inference ({} fit): {} rows used, {} parameters, {} residual degrees of freedom",
            self.solver, self.usable_rows, self.parameters, self.residual_df
        )?;
        writeln!(
            f,
            "Covariance {}; {} intervals use t = {}",
            self.options.covariance.name(),
            level_percent(self.options.level),
            num(self.critical_value)
        )?;
        writeln!(f)?;
        let width = self
            .names
            .iter()
            .map(|s| s.chars().count())
            .chain(self.intercept.map(|_| "intercept".len()))
            .max()
            .unwrap_or(0);
        for (name, e) in self.names.iter().zip(&self.coefficients) {
            estimate_line(f, name, width, e)?;
        }
        if let Some(e) = &self.intercept {
            estimate_line(f, "intercept", width, e)?;
        }
        writeln!(f)?;
        let g = &self.goodness;
        writeln!(
            f,
            "  noise         sigma = {} (variance {})",
            num(self.residual_sd),
            num(self.residual_variance)
        )?;
        writeln!(
            f,
            "  explained     R^2 = {} ({}), adjusted {}",
            num(g.r_squared),
            if g.centered {
                "about the mean"
            } else {
                "about zero: no intercept, not comparable with a centered R^2"
            },
            num(g.adjusted_r_squared)
        )?;
        match &g.overall {
            Some(t) => writeln!(
                f,
                "  slopes all 0? F = {} with ({}, {}) degrees of freedom, {}",
                num(t.statistic),
                t.df_model,
                t.df_residual,
                prob(t.p_value)
            )?,
            None => writeln!(
                f,
                "  slopes all 0? no test (no slopes, or singular middle matrix)"
            )?,
        }
        writeln!(
            f,
            "  likelihood    log L = {}, AIC = {}, BIC = {} (counting {} parameters with sigma^2)",
            num(g.log_likelihood),
            num(g.aic),
            num(g.bic),
            g.likelihood_parameters
        )?;
        let c = &self.collinearity;
        let worst = c
            .vif
            .iter()
            .enumerate()
            .fold(None, |best: Option<(usize, f64)>, (j, &v)| match best {
                Some((_, b)) if b >= v => best,
                _ => Some((j, v)),
            });
        match worst {
            Some((j, v)) => writeln!(
                f,
                "  collinearity  condition {} (2-norm, power-of-two scaled {}columns), largest VIF {} for {}",
                num(c.condition_number),
                if c.centered {
                    "centered "
                } else {
                    "uncentered "
                },
                num(v),
                self.names.get(j).map_or("?", String::as_str)
            ),
            None => writeln!(f, "  collinearity  none (no columns)"),
        }
    }
}

impl fmt::Display for Diagnostics {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "Row diagnostics: {} rows ({} used; rows count from 0), leverages sum to {} (mean {})",
            self.leverage.len(),
            self.usable_rows,
            self.parameters,
            num(self.parameters as f64 / self.usable_rows.max(1) as f64)
        )?;
        match self.largest_leverage() {
            Some((i, h)) => writeln!(f, "  highest leverage          row {i}: {}", num(h))?,
            None => writeln!(f, "  highest leverage          none")?,
        }
        match self.largest_deleted_studentized() {
            Some((i, _)) => writeln!(
                f,
                "  largest deleted residual  row {i}: {}",
                num(self.deleted_studentized[i].unwrap_or(0.0))
            )?,
            None => writeln!(f, "  largest deleted residual  undefined")?,
        }
        match self.largest_cooks_distance() {
            Some((i, d)) => writeln!(f, "  largest Cook's distance   row {i}: {}", num(d)),
            None => writeln!(f, "  largest Cook's distance   undefined"),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::num;

    /// Inputs of realistic size and precision: NIST StRD Longley.dat
    /// certified values (residual standard deviation, |B2| and B0, 15
    /// significant digits as NIST printed them). The expected strings are
    /// their rounding to six significant digits, done by hand.
    #[test]
    fn numbers_keep_six_significant_digits() {
        assert_eq!(num(304.854073561965), "304.854");
        assert_eq!(num(0.0358191792925910), "0.0358192");
        assert_eq!(num(-3482258.63459582), "-3.48226e6");
        assert_eq!(num(0.0), "0");
        assert_eq!(num(f64::INFINITY), "inf");
    }
}

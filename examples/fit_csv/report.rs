//! What the example prints: a plain-text report of our own layout (the
//! model written as an equation, then the data, the solver and the
//! uncertainty), a side-by-side comparison of every solver, and the same
//! facts as one JSON object for scripts.

use std::fmt::Write as _;

use serde_json::{json, Map, Value};

use crate::fit::{CompareRun, Comparison, Summary};
use crate::read::Column;

/// Where the numbers came from, for the report's heading.
#[derive(Debug, Clone)]
pub struct Source<'a> {
    /// The file fitted.
    pub file: &'a str,
    /// The target column.
    pub target: &'a Column,
    /// The predictor columns.
    pub predictors: &'a [Column],
    /// The weights column.
    pub weights: Option<&'a Column>,
}

/// Things written besides the report (plots, saved model, predictions).
#[derive(Debug, Clone, Default)]
pub struct Outputs {
    /// SVG files written.
    pub plots: Vec<String>,
    /// Plots left out, with the reason.
    pub plots_skipped: Vec<String>,
    /// The saved model file.
    pub saved_model: Option<String>,
    /// Predictions: (file read, file written, rows).
    pub predictions: Option<(String, String, usize)>,
}

/// `v` with `digits` significant digits, in fixed notation for moderate
/// magnitudes and scientific otherwise.
pub fn sig(v: f64, digits: usize) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    if v == 0.0 {
        return "0".into();
    }
    let magnitude = v.abs().log10().floor() as i32;
    if (-4..9).contains(&magnitude) {
        let decimals = (digits as i32 - 1 - magnitude).max(0) as usize;
        format!("{v:.decimals$}")
    } else {
        format!("{v:.prec$e}", prec = digits.saturating_sub(1))
    }
}

fn seconds(s: f64) -> String {
    if s < 1e-3 {
        format!("{:.0} us", s * 1e6)
    } else if s < 1.0 {
        format!("{:.1} ms", s * 1e3)
    } else {
        format!("{s:.2} s")
    }
}

/// The plain-text report of one fit.
pub fn text(source: &Source<'_>, s: &Summary, outputs: &Outputs) -> String {
    let mut out = String::new();
    let target = source.target.label();
    let _ = writeln!(
        out,
        "fit_csv: {target} explained by {} column(s) of {}",
        s.columns, source.file
    );
    out.push('\n');

    // The model as an equation, one term per line.
    let lead = format!("  {target} =");
    let pad = " ".repeat(lead.chars().count());
    let mut first = true;
    if let Some(b0) = s.intercept {
        let _ = writeln!(out, "{lead} {:>16}", sig(b0, 7));
        first = false;
    }
    for (c, &b) in source.predictors.iter().zip(&s.coefficients) {
        let (sign, mag) = if b < 0.0 { ('-', -b) } else { ('+', b) };
        let prefix = if first { lead.clone() } else { pad.clone() };
        let shown = if first && sign == '+' {
            format!("{:>16}", sig(mag, 7))
        } else {
            format!("{sign} {:>14}", sig(mag, 7))
        };
        let _ = writeln!(out, "{prefix} {shown} x {}", c.label());
        first = false;
    }
    if first {
        let _ = writeln!(out, "{lead} 0 (no intercept, no predictors)");
    }
    out.push('\n');

    // The data and the solver.
    let skipped = s.rows_read - s.rows_used;
    let weights = match source.weights {
        Some(w) => format!(", weighted by {}", w.label()),
        None => String::new(),
    };
    let _ = writeln!(
        out,
        "  rows       {} read, {} used{}{}{}",
        s.rows_read,
        s.rows_used,
        if skipped > 0 {
            format!(" ({skipped} of weight 0 set aside)")
        } else {
            String::new()
        },
        weights,
        s.streamed_blocks.map_or(String::new(), |b| format!(
            "; streamed in {b} block(s), not kept"
        ))
    );
    let asked = if s.requested == s.solver {
        String::new()
    } else {
        format!(" (asked for {})", s.requested)
    };
    let _ = writeln!(
        out,
        "  solver     {}{asked} in {}; {}, {}",
        s.solver,
        seconds(s.seconds),
        s.rank.map_or("rank not measured".into(), |r| format!(
            "rank {r} of {}",
            s.columns
        )),
        s.condition
            .map_or("no condition estimate".into(), |c| format!(
                "condition estimate {}",
                sig(c, 3)
            ))
    );
    if s.penalty != 0.0 || s.chosen_by.is_some() {
        let how = match (s.chosen_by, s.chosen_at_edge) {
            (Some(c), Some(true)) => format!(
                ", the lowest {c} score of the penalties tried, at the end of their range \
                 (the data may ask for a penalty beyond it)"
            ),
            (Some(c), _) => format!(", the lowest {c} score of the penalties tried"),
            (None, _) => String::new(),
        };
        let _ = writeln!(out, "  penalty    {}{how}", sig(s.penalty, 4));
    }
    if let Some(it) = &s.iterations {
        let _ = writeln!(
            out,
            "  iterations {}, {} (relative gradient norm {}), {} passes over the rows",
            it.count,
            if it.converged {
                "converged"
            } else {
                "NOT converged: raise --max-iterations or loosen --tolerance"
            },
            sig(it.gradient_norm, 2),
            it.passes
        );
    }
    let _ = writeln!(
        out,
        "  residuals  {} weighted sum of squares, {}",
        sig(s.rss, 7),
        s.residual_df.map_or(
            "degrees of freedom not known (rank not measured)".into(),
            |d| format!("{d} degrees of freedom left")
        )
    );
    match &s.uncertainty {
        Ok(u) => {
            let _ = writeln!(
                out,
                "  spread     sigma {}{}, R^2 {}{}",
                sig(u.sigma, 5),
                source
                    .target
                    .unit
                    .as_deref()
                    .map_or(String::new(), |u| format!(" {u}")),
                sig(u.r_squared, 5),
                if u.centered { "" } else { " (about zero)" }
            );
            out.push('\n');
            for line in u.text.lines() {
                let _ = writeln!(out, "  | {line}");
            }
        }
        Err(why) => {
            if s.streamed_blocks.is_some() && (s.sigma.is_some() || s.r_squared.is_some()) {
                let unit = source
                    .target
                    .unit
                    .as_deref()
                    .map_or(String::new(), |u| format!(" {u}"));
                let mut parts = Vec::new();
                if let Some(sigma) = s.sigma {
                    parts.push(format!("sigma {}{unit}", sig(sigma, 5)));
                }
                if let Some(r2) = s.r_squared {
                    let about = if s.intercept.is_some() {
                        ""
                    } else {
                        " (about zero)"
                    };
                    parts.push(format!("R^2 {}{about}", sig(r2, 5)));
                }
                let _ = writeln!(out, "  spread     {}", parts.join(", "));
            }
            let _ = writeln!(out, "  spread     no standard errors or intervals: {why}");
        }
    }
    outputs_text(&mut out, outputs);
    out
}

fn outputs_text(out: &mut String, o: &Outputs) {
    if o.plots.is_empty()
        && o.plots_skipped.is_empty()
        && o.saved_model.is_none()
        && o.predictions.is_none()
    {
        return;
    }
    out.push('\n');
    for p in &o.plots {
        let _ = writeln!(out, "  wrote      {p}");
    }
    for p in &o.plots_skipped {
        let _ = writeln!(out, "  no plot    {p}");
    }
    if let Some(m) = &o.saved_model {
        let _ = writeln!(out, "  saved      {m}");
    }
    if let Some((from, to, n)) = &o.predictions {
        let _ = writeln!(out, "  predicted  {n} rows of {from} into {to}");
    }
}

/// One entry per predictor, keyed by its name.
fn by_name(predictors: &[Column], values: impl Iterator<Item = Value>) -> Value {
    let mut m = Map::new();
    for (c, v) in predictors.iter().zip(values) {
        m.insert(c.name.clone(), v);
    }
    Value::Object(m)
}

/// The JSON object of one fit.
pub fn json(source: &Source<'_>, s: &Summary, outputs: &Outputs) -> Value {
    let p = source.predictors;
    let units = by_name(p, p.iter().map(|c| json!(c.unit)));
    let mut v = json!({
        "file": source.file,
        "target": source.target.name,
        "target_unit": source.target.unit,
        "weights": source.weights.map(|c| c.name.clone()),
        "solver": s.solver,
        "requested_solver": s.requested,
        "coefficients": by_name(p, s.coefficients.iter().map(|&b| json!(b))),
        "intercept": s.intercept,
        "units": units,
        "rss": s.rss,
        "rows_used": s.rows_used,
        "rows_read": s.rows_read,
        "rank": s.rank,
        "condition": s.condition,
        "residual_df": s.residual_df,
        "penalty": s.penalty,
        "penalty_chosen_by": s.chosen_by,
        "penalty_at_grid_end": s.chosen_at_edge,
        "seconds": s.seconds,
        "iterations": s.iterations.as_ref().map(|it| json!({
            "count": it.count,
            "converged": it.converged,
            "gradient_norm": it.gradient_norm,
            "passes": it.passes,
        })),
        "streamed": s.streamed_blocks.is_some(),
        "blocks": s.streamed_blocks,
        "plots": outputs.plots,
        "saved_model": outputs.saved_model,
        "predictions": outputs.predictions.as_ref().map(|(from, to, n)| json!({
            "from": from, "to": to, "rows": n,
        })),
    });
    let extra = match &s.uncertainty {
        Ok(u) => json!({
            "sigma": u.sigma,
            "r_squared": u.r_squared,
            "adjusted_r_squared": u.adjusted_r_squared,
            "r_squared_about_mean": u.centered,
            "level": u.level,
            "standard_errors": by_name(p, u.slopes.iter().map(|e| json!(e.std_error))),
            "intervals": by_name(p, u.slopes.iter().map(|e| json!([e.lower, e.upper]))),
            "p_values": by_name(p, u.slopes.iter().map(|e| json!(e.p_value))),
            "intercept_standard_error": u.intercept.map(|e| e.std_error),
            "intercept_interval": u.intercept.map(|e| [e.lower, e.upper]),
            "no_inference_because": Value::Null,
        }),
        Err(why) if s.streamed_blocks.is_some() => json!({
            "sigma": s.sigma,
            "r_squared": s.r_squared,
            "no_inference_because": why,
        }),
        Err(why) => json!({ "no_inference_because": why }),
    };
    if let (Value::Object(m), Value::Object(e)) = (&mut v, extra) {
        m.extend(e);
    }
    v
}

/// The comparison of every solver, as text.
pub fn compare_text(source: &Source<'_>, run: &CompareRun) -> String {
    let (rows, reference, used) = (&run.rows, run.reference, run.rows_used);
    let mut out = String::new();
    let _ = writeln!(
        out,
        "fit_csv: every solver on {} from {} ({used} rows used, {} predictors)",
        source.target.label(),
        source.file,
        source.predictors.len()
    );
    let _ = writeln!(
        out,
        "digits: significant digits of the worst parameter that agree with {}; \
         time: the fastest of up to three runs;\nridge runs at penalty 0, the gradient solvers \
         at their default tolerance unless --tolerance is given\n",
        reference.unwrap_or("no fit (both QR fits were refused)")
    );
    let qr_time = rows
        .iter()
        .find(|c| c.flag == "qr" && c.outcome.is_ok())
        .map(|c| c.seconds);
    let _ = writeln!(
        out,
        "  {:<12} {:>10} {:>8} {:>7} {:>16}  note",
        "solver", "time", "vs qr", "digits", "residual SS"
    );
    for c in rows {
        let ratio = match qr_time {
            Some(t) if t > 0.0 => format!("{:.2}x", c.seconds / t),
            _ => "-".into(),
        };
        match &c.outcome {
            Ok(f) => {
                let note = match &f.iterations {
                    Some(it) if it.converged => format!("converged, {} iteration(s)", it.count),
                    Some(it) => format!("NOT converged, stopped after {} iteration(s)", it.count),
                    None if f.solver != c.flag => format!("ran as {}", f.solver),
                    None => String::new(),
                };
                let _ = writeln!(
                    out,
                    "  {:<12} {:>10} {:>8} {:>7} {:>16}  {note}",
                    c.flag,
                    seconds(c.seconds),
                    ratio,
                    f.digits.map_or("-".into(), |d| format!("{d:.1}")),
                    sig(f.rss, 9),
                );
            }
            Err(why) => {
                let _ = writeln!(
                    out,
                    "  {:<12} {:>10} {:>8} {:>7} {:>16}  refused: {why}",
                    c.flag,
                    seconds(c.seconds),
                    "-",
                    "-",
                    "-"
                );
            }
        };
    }
    // The parameters side by side, one row each, one column per solver.
    out.push('\n');
    let ok: Vec<&Comparison> = rows.iter().filter(|c| c.outcome.is_ok()).collect();
    let name_width = source
        .predictors
        .iter()
        .map(|c| c.label().chars().count())
        .chain(std::iter::once("intercept".len()))
        .max()
        .unwrap_or(9);
    let _ = write!(out, "  {:<name_width$}", "parameter");
    for c in &ok {
        let _ = write!(out, " {:>14}", c.flag);
    }
    out.push('\n');
    let mut line = |label: &str, pick: &dyn Fn(&crate::fit::Compared) -> Option<f64>| {
        let _ = write!(out, "  {label:<name_width$}");
        for c in &ok {
            if let Ok(f) = &c.outcome {
                let _ = write!(out, " {:>14}", pick(f).map_or("-".into(), |v| sig(v, 9)));
            }
        }
        out.push('\n');
    };
    for (j, col) in source.predictors.iter().enumerate() {
        line(&col.label(), &|f| f.coefficients.get(j).copied());
    }
    if ok
        .iter()
        .any(|c| matches!(&c.outcome, Ok(f) if f.intercept.is_some()))
    {
        line("intercept", &|f| f.intercept);
    }
    out
}

/// The comparison as one JSON object.
pub fn compare_json(source: &Source<'_>, run: &CompareRun) -> Value {
    let (rows, reference, used) = (&run.rows, run.reference, run.rows_used);
    let p = source.predictors;
    let solvers: Vec<Value> = rows
        .iter()
        .map(|c| match &c.outcome {
            Ok(f) => json!({
                "solver": c.flag,
                "ran_as": f.solver,
                "seconds": c.seconds,
                "digits": f.digits,
                "coefficients": by_name(p, f.coefficients.iter().map(|&b| json!(b))),
                "intercept": f.intercept,
                "rss": f.rss,
                "converged": f.iterations.as_ref().map(|it| it.converged),
                "error": Value::Null,
            }),
            Err(why) => json!({
                "solver": c.flag,
                "seconds": c.seconds,
                "error": why,
            }),
        })
        .collect();
    json!({
        "file": source.file,
        "target": source.target.name,
        "rows_used": used,
        "reference": reference,
        "solvers": solvers,
    })
}

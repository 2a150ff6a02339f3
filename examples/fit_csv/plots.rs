//! Diagnostic plots as SVG files (plotters).
//!
//! - `observed_vs_fitted.svg`: one dot per row, and the line where observed
//!   equals fitted;
//! - `residuals_vs_fitted.svg`: residual against fitted value, and zero;
//! - `normal_quantiles.svg`: the sorted studentized residuals against the
//!   standard normal quantiles at the plotting positions `(i - 1/2) / m`
//!   (a common convention), and the line of slope one;
//! - `leverage.svg`: studentized residual against leverage, with the
//!   contours where Cook's distance `D = r^2 h / (k (1 - h))` equals 0.5
//!   and 1 (`r = +-sqrt(D k (1 - h) / h)`), the rows of the three largest
//!   distances labelled with their line in the file;
//! - `penalty_curve.svg`: ridge's selection criterion against the penalty
//!   (both axes logarithmic), the chosen penalty marked.
//!
//! Rows of weight 0 are not drawn. Above [`MAX_POINTS`] rows, every k-th
//! row is drawn and the caption says so.

use std::path::{Path, PathBuf};

use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use statrs::distribution::{ContinuousCDF, Normal};

use crate::fit::{Curve, RowTable};
use crate::report::sig;

/// Most dots drawn per plot.
pub const MAX_POINTS: usize = 20_000;

const SIZE: (u32, u32) = (900, 660);
const DOT: RGBColor = RGBColor(31, 94, 158);
const GUIDE: RGBColor = RGBColor(196, 78, 52);
const CONTOUR: RGBColor = RGBColor(120, 120, 120);

/// The labels on the axes.
#[derive(Debug, Clone)]
pub struct Labels {
    /// The target, `name [unit]`.
    pub target: String,
}

/// Plots written and plots left out (with the reason).
#[derive(Debug, Default)]
pub struct Written {
    /// Paths of the SVG files.
    pub files: Vec<PathBuf>,
    /// `name: reason` for each plot left out.
    pub skipped: Vec<String>,
}

type Failure = String;

fn err<E: std::fmt::Debug>(e: E) -> Failure {
    format!("{e:?}")
}

/// Writes every plot that applies into `dir` (created if needed).
pub fn write_all(
    dir: &Path,
    rows: &RowTable,
    curve: Option<&Curve>,
    labels: &Labels,
    no_diagnostics_because: Option<&str>,
) -> Result<Written, (PathBuf, Failure)> {
    std::fs::create_dir_all(dir).map_err(|e| (dir.to_path_buf(), e.to_string()))?;
    let mut out = Written::default();
    let (step, note) = thinning(rows.fitted.len());
    let zero_note = if rows.zero_weight_rows > 0 {
        format!(", {} rows of weight 0 not drawn", rows.zero_weight_rows)
    } else {
        String::new()
    };
    let t = &labels.target;

    let path = dir.join("observed_vs_fitted.svg");
    let pts: Vec<(f64, f64)> = (0..rows.fitted.len())
        .step_by(step)
        .map(|i| (rows.fitted[i], rows.observed[i]))
        .collect();
    scatter(
        &path,
        &format!("{t}: observed against fitted{note}{zero_note}"),
        &format!("fitted {t}"),
        &format!("observed {t}"),
        &pts,
        Guide::Diagonal,
    )
    .map_err(|e| (path.clone(), e))?;
    out.files.push(path);

    let path = dir.join("residuals_vs_fitted.svg");
    let pts: Vec<(f64, f64)> = (0..rows.fitted.len())
        .step_by(step)
        .map(|i| (rows.fitted[i], rows.observed[i] - rows.fitted[i]))
        .collect();
    scatter(
        &path,
        &format!("{t}: residual against fitted{note}{zero_note}"),
        &format!("fitted {t}"),
        &format!("residual (observed - fitted) {t}"),
        &pts,
        Guide::Zero,
    )
    .map_err(|e| (path.clone(), e))?;
    out.files.push(path);

    match &rows.diagnostics {
        Some(d) => {
            let path = dir.join("normal_quantiles.svg");
            let mut r: Vec<f64> = d.studentized.iter().flatten().copied().collect();
            r.sort_by(f64::total_cmp);
            let m = r.len();
            let normal = Normal::standard();
            let pts: Vec<(f64, f64)> = (0..m)
                .step_by(thinning(m).0)
                .map(|i| (normal.inverse_cdf((i as f64 + 0.5) / m as f64), r[i]))
                .collect();
            scatter(
                &path,
                &format!(
                    "{t}: studentized residuals against normal quantiles{}",
                    thinning(m).1
                ),
                "standard normal quantile",
                "studentized residual (residual / its standard error)",
                &pts,
                Guide::Diagonal,
            )
            .map_err(|e| (path.clone(), e))?;
            out.files.push(path);

            let path = dir.join("leverage.svg");
            leverage(&path, t, rows, d).map_err(|e| (path.clone(), e))?;
            out.files.push(path);
        }
        None => {
            let why = no_diagnostics_because.unwrap_or("no inference for this fit");
            out.skipped
                .push(format!("normal_quantiles.svg and leverage.svg: {why}"));
        }
    }

    if let Some(c) = curve {
        let path = dir.join("penalty_curve.svg");
        penalty_curve(&path, t, c).map_err(|e| (path.clone(), e))?;
        out.files.push(path);
    }
    Ok(out)
}

/// Every `step`-th row is drawn; the note says so when `step > 1`.
fn thinning(n: usize) -> (usize, String) {
    if n <= MAX_POINTS {
        (1, String::new())
    } else {
        let step = n.div_ceil(MAX_POINTS);
        (step, format!(" (every {step}th of {n} rows)"))
    }
}

/// A padded range holding every value (and `extra`).
fn range(values: impl Iterator<Item = f64>, extra: &[f64]) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values
        .chain(extra.iter().copied())
        .filter(|v| v.is_finite())
    {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if lo > hi {
        return (-1.0, 1.0);
    }
    let pad = if hi > lo {
        0.05 * (hi - lo)
    } else {
        0.5 * lo.abs().max(1.0)
    };
    (lo - pad, hi + pad)
}

#[derive(Clone, Copy)]
enum Guide {
    Diagonal,
    Zero,
}

type Chart<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

fn chart_frame<'a, 'b>(
    root: &'a DrawingArea<SVGBackend<'b>, plotters::coord::Shift>,
    caption: &str,
    x: (f64, f64),
    y: (f64, f64),
) -> Result<Chart<'a, 'b>, Failure> {
    root.fill(&WHITE).map_err(err)?;
    ChartBuilder::on(root)
        .caption(caption, ("sans-serif", 20))
        .margin(18)
        .x_label_area_size(56)
        .y_label_area_size(84)
        .build_cartesian_2d(x.0..x.1, y.0..y.1)
        .map_err(err)
}

fn mesh(chart: &mut Chart<'_, '_>, x_label: &str, y_label: &str) -> Result<(), Failure> {
    chart
        .configure_mesh()
        .x_desc(x_label)
        .y_desc(y_label)
        .axis_desc_style(("sans-serif", 17))
        .label_style(("sans-serif", 14))
        .light_line_style(RGBColor(236, 236, 236))
        .bold_line_style(RGBColor(214, 214, 214))
        .draw()
        .map_err(err)
}

fn scatter(
    path: &Path,
    caption: &str,
    x_label: &str,
    y_label: &str,
    pts: &[(f64, f64)],
    guide: Guide,
) -> Result<(), Failure> {
    let x = range(pts.iter().map(|p| p.0), &[]);
    let y = match guide {
        Guide::Zero => range(pts.iter().map(|p| p.1), &[0.0]),
        Guide::Diagonal => range(pts.iter().map(|p| p.1), &[]),
    };
    let root = SVGBackend::new(path, SIZE).into_drawing_area();
    let mut chart = chart_frame(&root, caption, x, y)?;
    mesh(&mut chart, x_label, y_label)?;
    let line = match guide {
        Guide::Zero => vec![(x.0, 0.0), (x.1, 0.0)],
        Guide::Diagonal => {
            let lo = x.0.max(y.0);
            let hi = x.1.min(y.1);
            if lo < hi {
                vec![(lo, lo), (hi, hi)]
            } else {
                Vec::new()
            }
        }
    };
    chart
        .draw_series(LineSeries::new(line, GUIDE.stroke_width(2)))
        .map_err(err)?;
    chart
        .draw_series(
            pts.iter()
                .map(|&p| Circle::new(p, 3, DOT.mix(0.55).filled())),
        )
        .map_err(err)?;
    root.present().map_err(err)
}

fn leverage(
    path: &Path,
    target: &str,
    rows: &RowTable,
    d: &crate::fit::RowDiagnostics,
) -> Result<(), Failure> {
    let pts: Vec<(f64, f64, Option<f64>, u64)> = (0..d.leverage.len())
        .filter_map(|i| d.studentized[i].map(|r| (d.leverage[i], r, d.cooks[i], rows.lines[i])))
        .collect();
    let (step, note) = thinning(pts.len());
    let h_max = pts.iter().map(|p| p.0).fold(0.0, f64::max);
    let x = (0.0, (h_max * 1.1).clamp(1e-3, 1.0));
    let y = range(pts.iter().map(|p| p.1), &[-2.0, 2.0]);
    let root = SVGBackend::new(path, SIZE).into_drawing_area();
    let mut chart = chart_frame(
        &root,
        &format!("{target}: leverage and studentized residual{note}; dashed: Cook's distance"),
        x,
        y,
    )?;
    mesh(
        &mut chart,
        "leverage (influence of a row on its own fitted value)",
        "studentized residual",
    )?;
    chart
        .draw_series(LineSeries::new(
            vec![(x.0, 0.0), (x.1, 0.0)],
            CONTOUR.stroke_width(1),
        ))
        .map_err(err)?;
    let k = d.parameters as f64;
    for level in [0.5, 1.0] {
        for sign in [1.0, -1.0] {
            let curve: Vec<(f64, f64)> = (1..=200)
                .map(|s| x.0 + (x.1 - x.0) * s as f64 / 200.0)
                .filter(|&h| h < 1.0)
                .map(|h| (h, sign * (level * k * (1.0 - h) / h).sqrt()))
                .filter(|&(_, r)| r > y.0 && r < y.1)
                .collect();
            if curve.len() < 2 {
                continue;
            }
            // Label the curve where it leaves the plot, written leftwards
            // from there so that it stays inside.
            let end = curve[curve.len() - 1];
            chart
                .draw_series(DashedLineSeries::new(curve, 6, 4, CONTOUR.stroke_width(1)))
                .map_err(err)?;
            let anchor = if sign > 0.0 {
                Pos::new(HPos::Right, VPos::Bottom)
            } else {
                Pos::new(HPos::Right, VPos::Top)
            };
            chart
                .draw_series(std::iter::once(Text::new(
                    format!("Cook's distance {level}"),
                    end,
                    ("sans-serif", 13).into_font().color(&CONTOUR).pos(anchor),
                )))
                .map_err(err)?;
        }
    }
    chart
        .draw_series(
            pts.iter()
                .step_by(step)
                .map(|p| Circle::new((p.0, p.1), 3, DOT.mix(0.55).filled())),
        )
        .map_err(err)?;
    // The three rows that move the fit most, by their line in the file.
    let mut by_cook: Vec<&(f64, f64, Option<f64>, u64)> =
        pts.iter().filter(|p| p.2.is_some()).collect();
    by_cook.sort_by(|a, b| b.2.unwrap_or(0.0).total_cmp(&a.2.unwrap_or(0.0)));
    chart
        .draw_series(by_cook.iter().take(3).map(|p| {
            Text::new(
                format!("  line {}", p.3),
                (p.0, p.1),
                ("sans-serif", 13).into_font().color(&GUIDE),
            )
        }))
        .map_err(err)?;
    root.present().map_err(err)
}

fn penalty_curve(path: &Path, target: &str, c: &Curve) -> Result<(), Failure> {
    // Drawn on log10 coordinates with labels in the data's units (plotters'
    // own log axes label only whole decades).
    let raw: Vec<(f64, f64)> = c
        .penalties
        .iter()
        .zip(&c.scores)
        .filter(|(l, s)| **l > 0.0 && s.is_finite() && **s > 0.0)
        .map(|(&l, &s)| (l, s))
        .collect();
    if raw.is_empty() {
        return Err("no penalty has a positive finite score to draw".into());
    }
    let (s_lo, s_hi) = raw.iter().fold((f64::INFINITY, 0.0_f64), |(lo, hi), p| {
        (lo.min(p.1), hi.max(p.1))
    });
    let log_y = s_hi > 50.0 * s_lo;
    let pts: Vec<(f64, f64)> = raw
        .iter()
        .map(|&(l, s)| (l.log10(), if log_y { s.log10() } else { s }))
        .collect();
    let x = range(pts.iter().map(|p| p.0), &[]);
    let y = range(pts.iter().map(|p| p.1), &[]);
    let chosen = c.penalties[c.chosen];
    let edge = if c.chosen == 0 || c.chosen + 1 == c.penalties.len() {
        ", at the end of the range tried"
    } else {
        ""
    };
    let df = sig(c.effective_df[c.chosen], 3);
    let root = SVGBackend::new(path, SIZE).into_drawing_area();
    let mut chart = chart_frame(
        &root,
        &format!("{target}: ridge penalty by {}", c.criterion),
        x,
        y,
    )?;
    chart
        .configure_mesh()
        .x_desc("penalty lambda, in the units of the data (log scale)")
        .y_desc(format!(
            "{} score, mean squared error{}",
            c.criterion,
            if log_y { " (log scale)" } else { "" }
        ))
        .axis_desc_style(("sans-serif", 17))
        .label_style(("sans-serif", 14))
        .x_labels(10)
        .y_labels(10)
        .x_label_formatter(&|v| sig(10f64.powf(*v), 2))
        .y_label_formatter(&|v| sig(if log_y { 10f64.powf(*v) } else { *v }, 3))
        .light_line_style(RGBColor(236, 236, 236))
        .bold_line_style(RGBColor(214, 214, 214))
        .draw()
        .map_err(err)?;
    let cx = chosen.log10();
    chart
        .draw_series(DashedLineSeries::new(
            vec![(cx, y.0), (cx, y.1)],
            6,
            4,
            GUIDE.stroke_width(2),
        ))
        .map_err(err)?;
    let anchor = if cx < 0.5 * (x.0 + x.1) {
        Pos::new(HPos::Left, VPos::Top)
    } else {
        Pos::new(HPos::Right, VPos::Top)
    };
    chart
        .draw_series(std::iter::once(Text::new(
            format!(
                "  chosen {}: {df} effective parameters{edge}  ",
                sig(chosen, 4)
            ),
            (cx, y.1),
            ("sans-serif", 14).into_font().color(&GUIDE).pos(anchor),
        )))
        .map_err(err)?;
    chart
        .draw_series(LineSeries::new(pts.clone(), DOT.stroke_width(2)))
        .map_err(err)?;
    chart
        .draw_series(pts.iter().map(|&p| Circle::new(p, 3, DOT.filled())))
        .map_err(err)?;
    root.present().map_err(err)
}

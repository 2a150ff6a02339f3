//! Self-check of the converted NIST StRD linear least-squares datasets in
//! `data/nist/` and of the loader in `tests/common/nist.rs`. No fitting here:
//! this only proves the data and certified values arrive intact.
//!
//! Spot values are quoted from the NIST StRD originals (file and line given
//! beside each check); they are compared with `==`, since the loader parses
//! the same decimal text that NIST printed.

mod common;

use common::nist::{self, lre, Dataset};

/// (name, observations, intercept, degree (None = multiple linear), slopes, difficulty)
type Shape = (
    &'static str,
    usize,
    bool,
    Option<usize>,
    usize,
    &'static str,
);

/// Taken from the header block (lines 1-24) of each NIST `.dat` file.
const EXPECTED: [Shape; 11] = [
    ("Norris", 36, true, Some(1), 1, "lower"),
    ("Pontius", 40, true, Some(2), 2, "lower"),
    ("NoInt1", 11, false, Some(1), 1, "average"),
    ("NoInt2", 3, false, Some(1), 1, "average"),
    ("Filip", 82, true, Some(10), 10, "higher"),
    ("Longley", 16, true, None, 6, "higher"),
    ("Wampler1", 21, true, Some(5), 5, "higher"),
    ("Wampler2", 21, true, Some(5), 5, "higher"),
    ("Wampler3", 21, true, Some(5), 5, "higher"),
    ("Wampler4", 21, true, Some(5), 5, "higher"),
    ("Wampler5", 21, true, Some(5), 5, "higher"),
];

fn all() -> Vec<Dataset> {
    nist::ALL.iter().map(|n| nist::load(n)).collect()
}

#[test]
fn all_list_matches_expected_table() {
    let names: Vec<&str> = EXPECTED.iter().map(|e| e.0).collect();
    assert_eq!(nist::ALL.to_vec(), names);
}

#[test]
fn shapes_and_models_match_nist_headers() {
    for &(name, n, intercept, degree, slopes, difficulty) in &EXPECTED {
        let d = nist::load(name);
        assert_eq!(d.name, name);
        assert_eq!(d.n_obs(), n, "{name}: observations");
        assert_eq!(d.y.len(), n, "{name}: y length");
        assert_eq!(d.x.nrows(), n, "{name}: x rows");
        assert_eq!(d.x.ncols(), slopes, "{name}: x columns");
        assert_eq!(d.intercept, intercept, "{name}: intercept");
        assert_eq!(d.degree, degree, "{name}: degree");
        assert_eq!(d.difficulty, difficulty, "{name}: difficulty");
        assert_eq!(d.certified.coefficients.len(), slopes, "{name}: slopes");
        assert_eq!(
            d.certified.intercept.is_some(),
            intercept,
            "{name}: B0 present"
        );
        assert_eq!(
            d.n_params(),
            slopes + usize::from(intercept),
            "{name}: parameters"
        );
        assert_eq!(
            d.certified.estimates().len(),
            d.n_params(),
            "{name}: estimates()"
        );
        assert_eq!(
            d.certified.std_devs().len(),
            d.n_params(),
            "{name}: std_devs()"
        );
        // ANOVA degrees of freedom agree with the model.
        assert_eq!(
            d.certified.df_regression, slopes as f64,
            "{name}: df_regression"
        );
        assert_eq!(
            d.certified.df_residual,
            (n - d.n_params()) as f64,
            "{name}: df_residual"
        );
    }
}

#[test]
fn certified_values_are_finite_except_exact_fit_f() {
    for d in all() {
        let c = &d.certified;
        for (e, s) in c.intercept.iter().chain(c.coefficients.iter()) {
            assert!(
                e.is_finite() && s.is_finite(),
                "{}: coefficient not finite",
                d.name
            );
            assert!(*s >= 0.0, "{}: negative standard deviation", d.name);
        }
        for (what, v) in [
            ("residual_sd", c.residual_sd),
            ("r_squared", c.r_squared),
            ("df_regression", c.df_regression),
            ("ss_regression", c.ss_regression),
            ("ms_regression", c.ms_regression),
            ("df_residual", c.df_residual),
            ("ss_residual", c.ss_residual),
            ("ms_residual", c.ms_residual),
        ] {
            assert!(v.is_finite(), "{}: {what} = {v}", d.name);
        }
        assert!((0.0..=1.0).contains(&c.r_squared), "{}: R²", d.name);
        // NIST StRD Wampler1.dat and Wampler2.dat, line 49: F printed as `Infinity`.
        if d.name == "Wampler1" || d.name == "Wampler2" {
            assert_eq!(c.f_statistic, f64::INFINITY, "{}: F", d.name);
        } else {
            assert!(c.f_statistic.is_finite(), "{}: F", d.name);
        }
        assert!(
            d.x.iter().chain(d.y.iter()).all(|v| v.is_finite()),
            "{}: data",
            d.name
        );
    }
}

/// The certified values are internally consistent (to rounding at 15 digits):
/// ms = ss / df, residual_sd² = ms_residual, R² = ss_reg / (ss_reg + ss_res)
/// (centered sums with an intercept, uncentered without), F = ms_reg / ms_res.
#[test]
fn certified_values_are_mutually_consistent() {
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * a.abs().max(b.abs()) + 1e-300;
    for d in all() {
        let c = &d.certified;
        let n = &d.name;
        assert!(
            close(c.ms_regression, c.ss_regression / c.df_regression),
            "{n}: ms_reg"
        );
        assert!(
            close(c.ms_residual, c.ss_residual / c.df_residual),
            "{n}: ms_res"
        );
        assert!(
            close(c.residual_sd * c.residual_sd, c.ms_residual),
            "{n}: residual_sd"
        );
        let r2 = c.ss_regression / (c.ss_regression + c.ss_residual);
        assert!(close(c.r_squared, r2), "{n}: R² {} vs {r2}", c.r_squared);
        if c.f_statistic.is_finite() {
            assert!(
                close(c.f_statistic, c.ms_regression / c.ms_residual),
                "{n}: F"
            );
        } else {
            assert_eq!(c.ss_residual, 0.0, "{n}: infinite F needs zero residual");
        }
    }
}

#[test]
// Wampler5's F statistic is quoted with the 17 digits NIST printed.
#[allow(clippy::excessive_precision)]
fn spot_checks_against_nist_originals() {
    let longley = nist::load("Longley");
    // NIST StRD Longley.dat, line 31: B0 -3482258.63459582 (sd 890420.383607373)
    assert_eq!(
        longley.certified.intercept,
        Some((-3482258.63459582, 890420.383607373))
    );
    // NIST StRD Longley.dat, line 37: B6 1829.15146461355 (sd 455.478499142212)
    assert_eq!(
        longley.certified.coefficients[5],
        (1829.15146461355, 455.478499142212)
    );
    // NIST StRD Longley.dat, line 33: B2 -0.358191792925910E-01
    assert_eq!(longley.certified.coefficients[1].0, -0.358191792925910E-01);
    // NIST StRD Longley.dat, line 40: residual standard deviation 304.854073561965
    assert_eq!(longley.certified.residual_sd, 304.854073561965);
    // NIST StRD Longley.dat, line 61: first row y=60323, x1..x6 = 83.0 234289 2356 1590 107608 1947
    assert_eq!(longley.y[0], 60323.0);
    assert_eq!(
        longley.x.row(0).to_vec(),
        vec![83.0, 234289.0, 2356.0, 1590.0, 107608.0, 1947.0]
    );
    // NIST StRD Longley.dat, line 76: last row x6 (year) = 1962
    assert_eq!(longley.x[[15, 5]], 1962.0);

    let norris = nist::load("Norris");
    // NIST StRD Norris.dat, line 32: B1 1.00211681802045 (sd 0.429796848199937E-03)
    assert_eq!(
        norris.certified.coefficients[0],
        (1.00211681802045, 0.429796848199937E-03)
    );
    // NIST StRD Norris.dat, line 31: B0 -0.262323073774029
    assert_eq!(norris.certified.intercept.unwrap().0, -0.262323073774029);
    // NIST StRD Norris.dat, line 37: R-Squared 0.999993745883712
    assert_eq!(norris.certified.r_squared, 0.999993745883712);
    // NIST StRD Norris.dat, lines 61 and 96: first row (0.1, 0.2), last row (0.2, 0.5)
    assert_eq!((norris.y[0], norris.x[[0, 0]]), (0.1, 0.2));
    assert_eq!((norris.y[35], norris.x[[35, 0]]), (0.2, 0.5));

    let filip = nist::load("Filip");
    // NIST StRD Filip.dat, line 41: B10 -0.402962525080404E-04 (sd 0.896632837373868E-05)
    assert_eq!(
        filip.certified.coefficients[9],
        (-0.402962525080404E-04, 0.896632837373868E-05)
    );
    // NIST StRD Filip.dat, line 31: B0 -1467.48961422980
    assert_eq!(filip.certified.intercept.unwrap().0, -1467.48961422980);
    // NIST StRD Filip.dat, line 55: residual SS 0.795851382172941E-03
    assert_eq!(filip.certified.ss_residual, 0.795851382172941E-03);
    // NIST StRD Filip.dat, line 61: first row y=0.8116, x=-6.860120914
    assert_eq!((filip.y[0], filip.x[[0, 0]]), (0.8116, -6.860120914));
    // NIST StRD Filip.dat, line 142: last row y=0.9228, x=-3.2644011
    assert_eq!((filip.y[81], filip.x[[81, 0]]), (0.9228, -3.2644011));

    let pontius = nist::load("Pontius");
    // NIST StRD Pontius.dat, line 33: B2 -0.316081871345029E-14
    assert_eq!(pontius.certified.coefficients[1].0, -0.316081871345029E-14);
    // NIST StRD Pontius.dat, line 61: `.11019  150000` (leading-point number)
    assert_eq!((pontius.y[0], pontius.x[[0, 0]]), (0.11019, 150000.0));
    assert_eq!(pontius.x[[0, 1]], 150000.0 * 150000.0);

    let noint1 = nist::load("NoInt1");
    // NIST StRD NoInt1.dat, line 31: B1 2.07438016528926 (sd 0.165289256198347E-01)
    assert_eq!(
        noint1.certified.coefficients[0],
        (2.07438016528926, 0.165289256198347E-01)
    );
    assert_eq!(noint1.certified.intercept, None);
    // NIST StRD NoInt1.dat, line 36: uncentered R-Squared 0.999365492298663
    assert_eq!(noint1.certified.r_squared, 0.999365492298663);

    let noint2 = nist::load("NoInt2");
    // NIST StRD NoInt2.dat, line 44: F statistic 298.6666666666667 (printed with 16 digits)
    assert_eq!(noint2.certified.f_statistic, 298.6666666666667);
    // NIST StRD NoInt2.dat, lines 61-63: (3, 4), (4, 5), (4, 6)
    assert_eq!(noint2.y.to_vec(), vec![3.0, 4.0, 4.0]);
    assert_eq!(noint2.x.column(0).to_vec(), vec![4.0, 5.0, 6.0]);

    let w1 = nist::load("Wampler1");
    // NIST StRD Wampler1.dat, lines 31-36: all estimates 1, all standard deviations 0
    assert_eq!(w1.certified.estimates(), vec![1.0; 6]);
    assert_eq!(w1.certified.std_devs(), vec![0.0; 6]);
    // NIST StRD Wampler1.dat, line 39: residual standard deviation 0
    assert_eq!(w1.certified.residual_sd, 0.0);

    let w2 = nist::load("Wampler2");
    // NIST StRD Wampler2.dat, lines 31-36: estimates 1, 0.1, ..., 1e-5
    assert_eq!(
        w2.certified.estimates(),
        vec![1.0, 0.1, 0.01, 0.001, 0.0001, 0.00001]
    );

    let w3 = nist::load("Wampler3");
    // NIST StRD Wampler3.dat, line 61: `760.     0` (trailing-point number)
    assert_eq!((w3.y[0], w3.x[[0, 0]]), (760.0, 0.0));

    let w5 = nist::load("Wampler5");
    // NIST StRD Wampler5.dat, line 49: F 6.7552445824012241E-03 (17 digits as printed)
    assert_eq!(w5.certified.f_statistic, 6.7552445824012241E-03);
    // NIST StRD Wampler5.dat, line 50: `0.835542680000000E+16 557028453333333.`
    assert_eq!(w5.certified.ss_residual, 0.835542680000000E+16);
    assert_eq!(w5.certified.ms_residual, 557028453333333.0);
    // NIST StRD Wampler5.dat, line 41: R-Squared 0.224668921574940E-02
    assert_eq!(w5.certified.r_squared, 0.224668921574940E-02);
}

/// Polynomial designs hold x, x², ..., x^d built by repeated multiplication.
#[test]
fn polynomial_columns_are_repeated_products() {
    for d in all() {
        let Some(deg) = d.degree else { continue };
        for r in 0..d.n_obs() {
            let v = d.x[[r, 0]];
            let mut p = v;
            for k in 1..deg {
                p *= v;
                assert_eq!(
                    d.x[[r, k]].to_bits(),
                    p.to_bits(),
                    "{} row {r} power {}",
                    d.name,
                    k + 1
                );
            }
        }
    }
    // NIST StRD Wampler1.dat, line 81: x = 20, so the x^5 column ends in 3.2e6.
    let w1 = nist::load("Wampler1");
    assert_eq!(
        w1.x.row(20).to_vec(),
        vec![20.0, 400.0, 8000.0, 160000.0, 3200000.0]
    );
}

/// Wampler1 is an exact fit y = 1 + x + x² + x³ + x⁴ + x⁵ (integers, so f64 is exact).
#[test]
fn wampler1_data_follow_its_certified_polynomial() {
    let d = nist::load("Wampler1");
    let b = d.certified.estimates();
    for r in 0..d.n_obs() {
        let fitted = b[0] + (0..5).map(|k| b[k + 1] * d.x[[r, k]]).sum::<f64>();
        assert_eq!(fitted, d.y[r], "row {r}");
    }
}

/// Every number in the converted files is in the plain form `[-]digits[.digits][E±dd]`
/// (or `Infinity`), i.e. the Fortran forms `.5` and `5.` were normalised.
#[test]
fn converted_files_use_normalised_numbers() {
    for name in nist::ALL {
        let path = format!("{}{name}.txt", nist::DATA_DIR);
        let text = std::fs::read_to_string(&path).unwrap();
        assert!(!text.contains('\r'), "{path}: CR in converted file");
        for (i, line) in text.lines().enumerate() {
            if line.starts_with('#') {
                continue;
            }
            for tok in line.split_whitespace() {
                if tok.parse::<f64>().is_ok() && tok != "Infinity" {
                    let body = tok.strip_prefix('-').unwrap_or(tok);
                    let mantissa = body.split(['E', 'e']).next().unwrap();
                    assert!(
                        !mantissa.starts_with('.')
                            && !mantissa.ends_with('.')
                            && !body.starts_with('+'),
                        "{path}:{}: number {tok:?} not normalised",
                        i + 1
                    );
                }
            }
        }
    }
}

#[test]
#[should_panic(expected = "data rows")]
fn parser_rejects_wrong_row_count() {
    let text = "name T\nmodel polynomial 1\nintercept no\ndifficulty lower\norigin generated\n\
                observations 2\ncertified coefficient 1 1.0 0.0\ncertified residual_sd 0\n\
                certified r_squared 1\ncertified df_regression 1\ncertified ss_regression 1\n\
                certified ms_regression 1\ncertified f_statistic Infinity\n\
                certified df_residual 1\ncertified ss_residual 0\ncertified ms_residual 0\n\
                data\n1 1\n";
    nist::parse(text, "inline");
}

#[test]
#[should_panic(expected = "unrecognised line")]
fn parser_rejects_unknown_keys() {
    nist::parse("name T\nslope 3\n", "inline");
}

#[test]
fn lre_basic_values() {
    // Seven correct digits.
    assert!(
        (lre(1.0000001, 1.0) - 7.0).abs() < 1e-6,
        "{}",
        lre(1.0000001, 1.0)
    );
    assert!((lre(-2.0002, -2.0) - 4.0).abs() < 1e-9);
    // Exact match, including certified zero, is capped at 15.
    assert_eq!(lre(0.0, 0.0), 15.0);
    assert_eq!(lre(1829.15146461355, 1829.15146461355), 15.0);
    // Closer than 1e-15 relative is still 15.
    assert_eq!(lre(1.0 + f64::EPSILON, 1.0), 15.0);
    // Certified zero: absolute error.
    assert!((lre(1e-9, 0.0) - 9.0).abs() < 1e-9);
    assert_eq!(lre(1e-20, 0.0), 15.0);
    // Far off: clamped at 0, never negative.
    assert_eq!(lre(1000.0, 1.0), 0.0);
    assert_eq!(lre(-1.0, 1.0), 0.0);
    assert_eq!(lre(5.0, 0.0), 0.0);
}

#[test]
fn lre_non_finite() {
    assert_eq!(lre(f64::NAN, 1.0), 0.0);
    assert_eq!(lre(f64::INFINITY, 1.0), 0.0);
    assert_eq!(lre(f64::NEG_INFINITY, 0.0), 0.0);
    // Certified infinite F (Wampler1/2): a finite value scores 0, the same infinity 15.
    assert_eq!(lre(1e300, f64::INFINITY), 0.0);
    assert_eq!(lre(f64::INFINITY, f64::INFINITY), 15.0);
    assert_eq!(lre(f64::NEG_INFINITY, f64::INFINITY), 0.0);
}

//! Mergeable fit states (issue 12).
//!
//! References, named beside each check:
//! - the in-memory solvers of this crate on the whole data (`Qr`,
//!   `Cholesky`), whose own accuracy is checked against NIST and
//!   independent libraries in `tests/accuracy.rs` and `tests/cross_check.rs`;
//! - the NIST StRD certified values (`data/nist`) for block-split data;
//! - exact identities (a fit of `k` targets is `k` fits of one target;
//!   merging is independent of the split up to rounding; a serialised
//!   state reads back to the same bits).

mod common;

use common::{gen, nist};
use leastline::{
    Cholesky, CrossProductState, Error, Fit, FitState, Input, Problem, Qr, Solver, TriangleState,
};
use ndarray::{s, Array1, Array2};
use proptest::prelude::*;
use rand::RngExt;
use rand_chacha::ChaCha8Rng;

/// `-log10` of the relative difference, capped at 16.
fn digits(a: f64, b: f64) -> f64 {
    if a == b {
        return 16.0;
    }
    (-((a - b).abs() / b.abs()).log10()).min(16.0)
}

/// Fewest digits shared by the intercept and the slopes of two fits. The
/// slopes count normwise (the largest difference against the largest
/// slope), the measure in which a solver's error is bounded: a slope near
/// zero beside large ones keeps the vector's absolute accuracy, not digits
/// of its own (a soak with random seeds found a slope of 0.002 beside one
/// of 1.37 sharing 12.7 digits of its own and 15.5 normwise).
fn shared_digits(a: &Fit, b: &Fit) -> f64 {
    let mut d = digits(a.model.intercept(), b.model.intercept());
    if b.model.intercept() == 0.0 {
        d = if a.model.intercept() == 0.0 {
            16.0
        } else {
            0.0
        };
    }
    let (sa, sb) = (a.model.coefficients(), b.model.coefficients());
    let largest = sb.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let worst = sa
        .iter()
        .zip(sb)
        .fold(0.0f64, |m, (x, y)| m.max((x - y).abs()));
    let slopes = if worst == 0.0 {
        16.0
    } else if largest == 0.0 {
        0.0
    } else {
        (-(worst / largest).log10()).min(16.0)
    };
    d.min(slopes)
}

/// A well-conditioned problem: columns with offsets and spreads, slopes of
/// magnitude 1 to 3, intercept 5, noise 0.1.
fn problem(rng: &mut ChaCha8Rng, n: usize, p: usize, k: usize) -> (Array2<f64>, Array2<f64>) {
    let mut x = gen::normal_matrix(rng, n, p);
    for j in 0..p {
        let offset = rng.random_range(-10.0..10.0);
        let spread = rng.random_range(0.5..4.0);
        x.column_mut(j).mapv_inplace(|v| offset + spread * v);
    }
    let mut y = Array2::zeros((n, k));
    for t in 0..k {
        let beta: Array1<f64> = Array1::from_shape_fn(p, |_| {
            let m = rng.random_range(1.0..3.0);
            if rng.random::<bool>() {
                m
            } else {
                -m
            }
        });
        let noise = gen::normal_vector(rng, n);
        let col = x.dot(&beta) + 5.0 + 0.1 * noise;
        y.column_mut(t).assign(&col);
    }
    (x, y)
}

/// Cut `0..n` into `blocks` ranges at random points (some may be empty).
fn cuts(rng: &mut ChaCha8Rng, n: usize, blocks: usize) -> Vec<(usize, usize)> {
    let mut points: Vec<usize> = (1..blocks).map(|_| rng.random_range(0..=n)).collect();
    points.push(0);
    points.push(n);
    points.sort_unstable();
    points.windows(2).map(|w| (w[0], w[1])).collect()
}

/// One state per block, merged in a random tree: two states drawn at
/// random are merged until one is left.
fn merged_state(
    rng: &mut ChaCha8Rng,
    x: &Array2<f64>,
    y: &Array2<f64>,
    w: Option<&Array1<f64>>,
    intercept: bool,
    blocks: usize,
) -> TriangleState {
    let (n, p) = x.dim();
    let mut states: Vec<TriangleState> = Vec::new();
    for (a, b) in cuts(rng, n, blocks) {
        let mut st = TriangleState::new(p, y.ncols(), intercept).expect("state");
        let wb = w.map(|w| w.slice(s![a..b]));
        st.absorb(x.slice(s![a..b, ..]), y.slice(s![a..b, ..]), wb)
            .expect("absorb");
        states.push(st);
    }
    while states.len() > 1 {
        let i = rng.random_range(0..states.len());
        let a = states.swap_remove(i);
        let j = rng.random_range(0..states.len());
        let mut b = states.swap_remove(j);
        if rng.random::<bool>() {
            b.merge(&a).expect("merge");
            states.push(b);
        } else {
            let mut a = a;
            a.merge(&b).expect("merge");
            states.push(a);
        }
    }
    states.pop().expect("one state")
}

fn in_memory(
    x: &Array2<f64>,
    y: &Array1<f64>,
    w: Option<&Array1<f64>>,
    intercept: bool,
) -> Result<Fit, Error> {
    let mut b = Problem::builder(x.view(), y.view()).with_intercept(intercept);
    if let Some(w) = w {
        b = b.with_weights(w.view());
    }
    Qr::new().fit(&b.build()?)
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(common::cases(48)))]

    /// Reference: the in-memory `Qr` fit of all rows. Random splits into
    /// 1..50 blocks, merged in random orders and tree shapes, weights and
    /// intercept on and off: at least 13 shared digits.
    #[test]
    fn merged_triangle_equals_in_memory_qr(
        seed in any::<u64>(),
        n in 12usize..400,
        p in 1usize..6,
        blocks in 1usize..50,
        weighted in any::<bool>(),
        intercept in any::<bool>(),
    ) {
        let mut rng = gen::rng(seed);
        let (x, y) = problem(&mut rng, n, p, 1);
        let w = weighted.then(|| {
            let mut w = gen::weights(&mut rng, n);
            // A few rows left out by weight zero.
            for _ in 0..n / 10 {
                let i = rng.random_range(0..n);
                w[i] = 0.0;
            }
            w
        });
        let y1 = y.column(0).to_owned();
        let reference = in_memory(&x, &y1, w.as_ref(), intercept);
        prop_assume!(reference.is_ok());
        let reference = reference.expect("checked");
        let state = merged_state(&mut rng, &x, &y, w.as_ref(), intercept, blocks);
        prop_assert_eq!(state.layout().rows, n);
        let fits = state.finish().expect("finish");
        prop_assert_eq!(fits.len(), 1);
        let fit = &fits[0];
        let d = shared_digits(fit, &reference);
        prop_assert!(d >= 13.0, "{} digits", d);
        let rr = reference.report.residual_sum_of_squares;
        let rs = fit.report.residual_sum_of_squares;
        prop_assert!(digits(rs, rr) >= 11.0, "RSS {} vs {}", rs, rr);
        prop_assert_eq!(fit.report.rank, reference.report.rank);
        prop_assert_eq!(fit.report.residual_df, reference.report.residual_df);
        prop_assert_eq!(fit.report.usable_rows, reference.report.usable_rows);
        let (cs, cr) = (fit.report.condition.unwrap_or(0.0), reference.report.condition.unwrap_or(1.0));
        // One condition number: the same 2-norm definition as in memory.
        prop_assert!(digits(cs, cr) >= 10.0, "condition {} vs {}", cs, cr);
        // sigma and R^2 as the in-memory report gives them.
        match (fit.report.sigma, reference.report.sigma) {
            (Some(a), Some(b)) => prop_assert!(digits(a, b) >= 11.0, "sigma {} vs {}", a, b),
            (a, b) => prop_assert_eq!(a, b),
        }
        match (fit.report.r_squared, reference.report.r_squared) {
            (Some(a), Some(b)) => prop_assert!((a - b).abs() <= 1e-11, "R2 {} vs {}", a, b),
            (a, b) => prop_assert_eq!(a, b),
        }
    }
}

/// Absorbs `x, y` in `blocks` equal blocks into a fresh state.
fn blockwise<S: FitState>(
    mut state: S,
    x: &Array2<f64>,
    y: &Array2<f64>,
    w: Option<&Array1<f64>>,
    blocks: usize,
) -> Result<S, Error> {
    let n = x.nrows();
    let size = n.div_ceil(blocks).max(1);
    let mut a = 0;
    while a < n {
        let b = (a + size).min(n);
        state.absorb(
            x.slice(s![a..b, ..]),
            y.slice(s![a..b, ..]),
            w.map(|w| w.slice(s![a..b])),
        )?;
        a = b;
    }
    Ok(state)
}

/// Reference: the in-memory `Cholesky` fit. The cross-product state of
/// blocks merged in a random tree shares at least 13 digits with it on
/// well-conditioned designs (both are normal-equation solutions; their
/// differences are rounding of the same quantities).
#[test]
fn cross_product_state_equals_in_memory_cholesky() {
    let mut worst = f64::INFINITY;
    for seed in 0..40u64 {
        let mut rng = gen::rng(1000 + seed);
        let n = rng.random_range(20..300);
        let p = rng.random_range(1..5);
        let intercept = seed % 2 == 0;
        let (x, y) = problem(&mut rng, n, p, 1);
        let w = (seed % 3 == 0).then(|| gen::weights(&mut rng, n));
        let mut states = Vec::new();
        for (a, b) in cuts(&mut rng, n, 1 + (seed as usize % 7)) {
            let mut st = CrossProductState::new(p, 1, intercept).expect("state");
            st.absorb(
                x.slice(s![a..b, ..]),
                y.slice(s![a..b, ..]),
                w.as_ref().map(|w| w.slice(s![a..b])),
            )
            .expect("absorb");
            states.push(st);
        }
        let mut state = states.pop().expect("one");
        while let Some(other) = states.pop() {
            state.merge(&other).expect("merge");
        }
        let y1 = y.column(0).to_owned();
        let mut b = Problem::builder(x.view(), y1.view()).with_intercept(intercept);
        if let Some(w) = &w {
            b = b.with_weights(w.view());
        }
        let reference = Cholesky::new()
            .fit(&b.build().expect("problem"))
            .expect("fit");
        let fit = &state.finish().expect("finish")[0];
        let d = shared_digits(fit, &reference);
        worst = worst.min(d);
        let (rs, rr) = (
            fit.report.residual_sum_of_squares,
            reference.report.residual_sum_of_squares,
        );
        assert!(digits(rs, rr) >= 10.0, "seed {seed}: RSS {rs} vs {rr}");
        assert_eq!(fit.report.residual_df, reference.report.residual_df);
        assert_eq!(fit.report.solver, "cholesky-state");
        let (a, b) = (
            fit.report.r_squared.unwrap(),
            reference.report.r_squared.unwrap(),
        );
        assert!((a - b).abs() <= 1e-10, "seed {seed}: R2 {a} vs {b}");
        let (a, b) = (fit.report.sigma.unwrap(), reference.report.sigma.unwrap());
        assert!(digits(a, b) >= 9.0, "seed {seed}: sigma {a} vs {b}");
    }
    assert!(worst >= 13.0, "cross-product state: {worst:.2} digits");
}

/// Reference: NIST StRD certified values. Split into blocks of 1 to 13
/// rows, the triangle state keeps the floors `tests/accuracy.rs` sets for
/// the in-memory QR.
#[test]
fn triangle_state_keeps_the_nist_floors() {
    const FLOORS: [(&str, f64); 11] = [
        ("Norris", 12.0),
        ("Pontius", 12.0),
        ("NoInt1", 14.0),
        ("NoInt2", 14.0),
        ("Filip", 7.0),
        ("Longley", 10.0),
        ("Wampler1", 9.0),
        ("Wampler2", 13.0),
        ("Wampler3", 9.0),
        ("Wampler4", 7.0),
        ("Wampler5", 5.0),
    ];
    for (name, floor) in FLOORS {
        let d = nist::load(name);
        let y = d.y.clone().insert_axis(ndarray::Axis(1));
        for blocks in [1usize, 3, 7, 13] {
            let state = TriangleState::new(d.x.ncols(), 1, d.intercept).expect("state");
            let state = blockwise(state, &d.x, &y, None, blocks).expect("absorb");
            let fit = &state
                .finish()
                .unwrap_or_else(|e| panic!("{name}: refused: {e}"))[0];
            let mut est = Vec::new();
            if d.intercept {
                est.push(fit.model.intercept());
            }
            est.extend(fit.model.coefficients().iter());
            let got = est
                .iter()
                .zip(d.certified.estimates())
                .map(|(c, r)| nist::lre(*c, r))
                .fold(f64::INFINITY, f64::min);
            eprintln!("{name} in {blocks} blocks: {got:.2} digits");
            assert!(
                got >= floor,
                "{name} in {blocks} blocks: {got:.2} < {floor}"
            );
        }
    }
}

/// Identity: a state of `k` targets finishes into the `k` fits of states
/// of one target each (15 digits).
#[test]
fn many_targets_equal_separate_fits() {
    let mut rng = gen::rng(77);
    let (mut x, y) = problem(&mut rng, 500, 4, 5);
    // Columns about zero, so that the intercept is not a cancelling sum
    // (its digits would measure the offsets, not the factorisation).
    for mut col in x.columns_mut() {
        let m = col.sum() / 500.0;
        col.mapv_inplace(|v| v - m);
    }
    let w = gen::weights(&mut rng, 500);
    for intercept in [true, false] {
        let all = blockwise(
            TriangleState::new(4, 5, intercept).expect("state"),
            &x,
            &y,
            Some(&w),
            6,
        )
        .expect("absorb")
        .finish()
        .expect("finish");
        let cross = blockwise(
            CrossProductState::new(4, 5, intercept).expect("state"),
            &x,
            &y,
            Some(&w),
            6,
        )
        .expect("absorb")
        .finish()
        .expect("finish");
        assert_eq!(all.len(), 5);
        for t in 0..5 {
            let yt = y.slice(s![.., t..t + 1]).to_owned();
            let one = blockwise(
                TriangleState::new(4, 1, intercept).expect("state"),
                &x,
                &yt,
                Some(&w),
                6,
            )
            .expect("absorb")
            .finish()
            .expect("finish");
            let d = shared_digits(&all[t], &one[0]);
            assert!(d >= 15.0, "triangle target {t}: {d:.2} digits");
            let rss = digits(
                all[t].report.residual_sum_of_squares,
                one[0].report.residual_sum_of_squares,
            );
            assert!(rss >= 14.0, "triangle target {t}: RSS {rss:.2} digits");
            let cone = blockwise(
                CrossProductState::new(4, 1, intercept).expect("state"),
                &x,
                &yt,
                Some(&w),
                6,
            )
            .expect("absorb")
            .finish()
            .expect("finish");
            let d = shared_digits(&cross[t], &cone[0]);
            assert!(d >= 15.0, "cross target {t}: {d:.2} digits");
        }
    }
}

/// A NaN in the 3rd block is reported at its row in the whole stream.
#[test]
fn row_errors_carry_global_row_numbers() {
    let mut rng = gen::rng(5);
    let (mut x, mut y) = problem(&mut rng, 30, 2, 1);
    x[(23, 1)] = f64::NAN;
    let mut st = TriangleState::new(2, 1, true).expect("state");
    for b in 0..2 {
        let r = s![b * 10..(b + 1) * 10, ..];
        st.absorb(x.slice(r), y.slice(r), None)
            .expect("clean block");
    }
    let before = st.clone();
    let err = st
        .absorb(x.slice(s![20..30, ..]), y.slice(s![20..30, ..]), None)
        .expect_err("NaN");
    assert!(
        matches!(err, Error::NonFinite { input: Input::Design, row: 23, column: Some(1), value, .. } if value.is_nan()),
        "{err:?}"
    );
    assert_eq!(st, before, "a refused block leaves the state unchanged");
    // The same for the target and for weights, in the cross-product state.
    x[(23, 1)] = 1.0;
    y[(27, 0)] = f64::INFINITY;
    let mut cs = CrossProductState::new(2, 1, true).expect("state");
    cs.absorb(x.slice(s![..20, ..]), y.slice(s![..20, ..]), None)
        .expect("clean");
    let err = cs
        .absorb(x.slice(s![20.., ..]), y.slice(s![20.., ..]), None)
        .expect_err("inf");
    assert_eq!(
        err,
        Error::NonFinite {
            input: Input::Target,
            row: 27,
            column: None,
            column_name: None,
            value: f64::INFINITY
        }
    );
    let mut w = Array1::from_elem(10, 1.0);
    w[4] = -1.0;
    let err = cs
        .absorb(x.slice(s![..10, ..]), y.slice(s![..10, ..]), Some(w.view()))
        .expect_err("negative weight");
    assert_eq!(
        err,
        Error::InvalidWeight {
            row: 24,
            value: -1.0
        }
    );
}

/// States of different shapes do not merge; blocks of the wrong shape are
/// refused; an empty or all-zero-weight state finishes into typed errors.
#[test]
fn mismatches_are_typed_errors() {
    let mut a = TriangleState::new(3, 1, true).expect("state");
    let b = TriangleState::new(2, 1, true).expect("state");
    assert_eq!(
        a.merge(&b),
        Err(Error::StateMismatch {
            what: "column count",
            left: 3,
            right: 2
        })
    );
    let c = TriangleState::new(3, 2, true).expect("state");
    assert!(matches!(
        a.merge(&c),
        Err(Error::StateMismatch {
            what: "target count",
            ..
        })
    ));
    let d = TriangleState::new(3, 1, false).expect("state");
    assert!(matches!(
        a.merge(&d),
        Err(Error::StateMismatch {
            what: "intercept",
            left: 1,
            right: 0
        })
    ));
    let named = TriangleState::new(3, 1, true)
        .and_then(|s| s.with_names(vec!["a".into(), "b".into(), "c".into()]))
        .expect("names");
    let other = TriangleState::new(3, 1, true)
        .and_then(|s| s.with_names(vec!["a".into(), "x".into(), "c".into()]))
        .expect("names");
    let mut m = named.clone();
    assert!(matches!(
        m.merge(&other),
        Err(Error::StateMismatch {
            what: "column names",
            left: 1,
            right: 1
        })
    ));
    assert!(matches!(
        TriangleState::new(3, 1, true).and_then(|s| s.with_names(vec!["a".into()])),
        Err(Error::ColumnCountMismatch { .. })
    ));
    assert!(matches!(
        TriangleState::new(2, 0, true),
        Err(Error::InvalidParameter {
            name: "targets",
            ..
        })
    ));
    assert!(matches!(
        CrossProductState::new(0, 1, false),
        Err(Error::NothingToFit)
    ));
    let x = Array2::<f64>::zeros((4, 2));
    let y = Array2::<f64>::zeros((4, 1));
    assert!(matches!(
        a.absorb(x.view(), y.view(), None),
        Err(Error::ColumnCountMismatch {
            expected: 3,
            found: 2
        })
    ));
    let x3 = Array2::<f64>::zeros((4, 3));
    let y2 = Array2::<f64>::zeros((4, 2));
    assert!(matches!(
        a.absorb(x3.view(), y2.view(), None),
        Err(Error::TargetCountMismatch {
            expected: 1,
            found: 2
        })
    ));
    let y5 = Array2::<f64>::zeros((5, 1));
    assert!(matches!(
        a.absorb(x3.view(), y5.view(), None),
        Err(Error::LengthMismatch {
            input: Input::Target,
            ..
        })
    ));
    assert_eq!(a.finish(), Err(Error::NoRows));
    let zero = Array1::<f64>::zeros(4);
    a.absorb(x3.view(), y.view(), Some(zero.view()))
        .expect("zero weights");
    assert_eq!(a.finish(), Err(Error::AllWeightsZero { rows: 4 }));
    let mut t = TriangleState::new(3, 1, true).expect("state");
    t.absorb(x3.slice(s![..2, ..]), y.slice(s![..2, ..]), None)
        .expect("two rows");
    assert_eq!(
        t.finish(),
        Err(Error::TooFewRows {
            usable_rows: 2,
            parameters: 4
        })
    );
}

/// Reference: the in-memory `Qr` fit of the same data; and the exact
/// identity that scaling a column by `2^e` scales its slope by `2^-e`.
/// Data near 1e-300 and 1e300 (columns and targets alike), absorbed in
/// blocks whose ranges differ so that the state rescales.
#[test]
fn data_near_the_ends_of_the_range() {
    let mut rng = gen::rng(9);
    let (x, y) = problem(&mut rng, 200, 3, 1);
    let base = blockwise(
        TriangleState::new(3, 1, true).expect("state"),
        &x,
        &y,
        None,
        5,
    )
    .expect("absorb")
    .finish()
    .expect("finish");
    for (ex, ey) in [
        (-1000, 0),
        (1000, 0),
        (0, -1000),
        (0, 500),
        (500, -500),
        (-500, 400),
        (0, 1000),
    ] {
        let xs = x.mapv(|v| v * common::p2(ex));
        let ys = y.mapv(|v| v * common::p2(ey));
        let y1 = ys.column(0).to_owned();
        let qr = Qr::new().fit(&Problem::new(xs.view(), y1.view()).expect("problem"));
        if let Err(e) = qr {
            // Targets near 1e300: the residual sum of squares itself lies
            // beyond f64; the states refuse as the in-memory fit does.
            assert_eq!(
                e,
                Error::Overflow {
                    what: "residual sum of squares"
                }
            );
            let st = blockwise(
                TriangleState::new(3, 1, true).expect("s"),
                &xs,
                &ys,
                None,
                7,
            )
            .expect("absorb");
            assert_eq!(st.finish(), Err(e.clone()));
            let cs = blockwise(
                CrossProductState::new(3, 1, true).expect("s"),
                &xs,
                &ys,
                None,
                7,
            )
            .expect("absorb");
            assert_eq!(cs.finish(), Err(e));
            continue;
        }
        let qr = qr.expect("checked");
        for state in [
            blockwise(
                TriangleState::new(3, 1, true).expect("s"),
                &xs,
                &ys,
                None,
                7,
            )
            .expect("absorb")
            .finish(),
            blockwise(
                CrossProductState::new(3, 1, true).expect("s"),
                &xs,
                &ys,
                None,
                7,
            )
            .expect("absorb")
            .finish(),
        ] {
            let fit = &state.unwrap_or_else(|e| panic!("2^{ex}, 2^{ey}: {e}"))[0];
            for (b, b0) in fit
                .model
                .coefficients()
                .iter()
                .zip(base[0].model.coefficients())
            {
                let expected = b0 * common::p2(ey - ex);
                assert!(
                    digits(*b, expected) >= 13.0,
                    "2^{ex}, 2^{ey}: {b:e} vs {expected:e}"
                );
            }
            let i0 = base[0].model.intercept() * common::p2(ey);
            assert!(
                digits(fit.model.intercept(), i0) >= 13.0,
                "2^{ex}, 2^{ey}: intercept {:e} vs {i0:e}",
                fit.model.intercept()
            );
            let rss0 = base[0].report.residual_sum_of_squares * common::p2(2 * ey);
            assert!(digits(fit.report.residual_sum_of_squares, rss0) >= 10.0);
        }
        let st = blockwise(
            TriangleState::new(3, 1, true).expect("s"),
            &xs,
            &ys,
            None,
            7,
        )
        .expect("absorb")
        .finish()
        .expect("finish");
        assert!(shared_digits(&st[0], &qr) >= 13.0);
    }
    // Blocks of very different ranges: the first block near 1, the second
    // near 1e200 (the column's range widens by 2^664 at the merge).
    let mut xw = x.clone();
    xw.slice_mut(s![100.., ..]).mapv_inplace(|v| v * 1e200);
    let y1 = y.column(0).to_owned();
    let qr = Qr::new()
        .fit(&Problem::new(xw.view(), y1.view()).expect("problem"))
        .expect("qr");
    let st = blockwise(TriangleState::new(3, 1, true).expect("s"), &xw, &y, None, 2)
        .expect("absorb")
        .finish()
        .expect("finish");
    let d = shared_digits(&st[0], &qr);
    assert!(d >= 12.0, "{d:.2} digits");
}

/// Identity: a state written as JSON reads back to the same bits, finishes
/// into the same fits and merges as the original does.
#[cfg(feature = "serde")]
#[test]
fn serde_round_trip_is_exact() {
    let mut rng = gen::rng(31);
    let (x, y) = problem(&mut rng, 300, 3, 2);
    let w = gen::weights(&mut rng, 300);
    let tri = blockwise(
        TriangleState::new(3, 2, true)
            .and_then(|s| s.with_names(vec!["heat".into(), "vent".into(), "lamp".into()]))
            .expect("state"),
        &x,
        &y,
        Some(&w),
        4,
    )
    .expect("absorb");
    let text = serde_json::to_string(&tri).expect("write");
    let back: TriangleState = serde_json::from_str(&text).expect("read");
    assert_eq!(back, tri);
    assert_eq!(back.finish(), tri.finish());
    let mut a = tri.clone();
    let mut b = back.clone();
    a.merge(&tri).expect("merge");
    b.merge(&back).expect("merge");
    assert_eq!(a, b);
    let cross = blockwise(
        CrossProductState::new(3, 2, false).expect("state"),
        &x,
        &y,
        Some(&w),
        4,
    )
    .expect("absorb");
    let text = serde_json::to_string(&cross).expect("write");
    let back: CrossProductState = serde_json::from_str(&text).expect("read");
    assert_eq!(back, cross);
    assert_eq!(back.finish(), cross.finish());
    // An empty state (extremes still infinite) round-trips too.
    let empty = TriangleState::new(2, 1, true).expect("state");
    let text = serde_json::to_string(&empty).expect("write");
    assert_eq!(
        serde_json::from_str::<TriangleState>(&text).expect("read"),
        empty
    );
}

/// The serialised state does not grow with the rows absorbed.
#[cfg(feature = "serde")]
#[test]
fn state_size_does_not_grow_with_rows() {
    let mut rng = gen::rng(41);
    let (x, y) = problem(&mut rng, 10_000, 4, 2);
    let len = |n: usize| {
        let tri = blockwise(
            TriangleState::new(4, 2, true).expect("state"),
            &x.slice(s![..n, ..]).to_owned(),
            &y.slice(s![..n, ..]).to_owned(),
            None,
            3,
        )
        .expect("absorb");
        let data = leastline::StateData::from(tri.clone());
        assert_eq!(data.matrix.len(), 36);
        assert_eq!(data.means.len(), 6);
        serde_json::to_string(&tri).expect("write").len()
    };
    let (small, large) = (len(10), len(10_000));
    // The same 36 + 4 * 6 numbers either way: only their printed digits
    // (at most 24 characters each) and the row counts differ.
    assert!(
        large <= small + 24 * 60 + 8,
        "10 rows: {small} bytes, 10,000 rows: {large} bytes"
    );
    assert!(large < 3000, "{large} bytes");
}

/// Corrupted states are typed errors naming the field.
#[cfg(feature = "serde")]
#[test]
fn corrupted_states_are_typed_errors() {
    use leastline::StateData;
    let mut rng = gen::rng(51);
    let (x, y) = problem(&mut rng, 50, 2, 1);
    let tri = blockwise(
        TriangleState::new(2, 1, true).expect("state"),
        &x,
        &y,
        None,
        2,
    )
    .expect("absorb");
    let good = StateData::from(tri);
    let field = |e: Result<TriangleState, Error>| match e {
        Err(Error::InvalidState { field, index, .. }) => (field, index),
        other => panic!("expected InvalidState, got {other:?}"),
    };
    let mut d = good.clone();
    d.matrix.pop();
    assert_eq!(field(TriangleState::try_from(d)), ("matrix", 8));
    let mut d = good.clone();
    d.matrix[4] = f64::NAN;
    assert_eq!(field(TriangleState::try_from(d)), ("matrix", 4));
    let mut d = good.clone();
    d.matrix[3] = 0.5; // row 1, column 0: below the diagonal
    assert_eq!(field(TriangleState::try_from(d)), ("matrix", 3));
    let mut d = good.clone();
    d.weight = -3.0;
    assert_eq!(field(TriangleState::try_from(d)), ("weight", 0));
    let mut d = good.clone();
    d.means.push(1.0);
    assert_eq!(field(TriangleState::try_from(d)), ("means", 4));
    let mut d = good.clone();
    d.means[1] = d.highs[1] + 1.0;
    assert_eq!(field(TriangleState::try_from(d)), ("means", 1));
    let mut d = good.clone();
    d.usable_rows = d.rows + 1;
    assert_eq!(field(TriangleState::try_from(d)), ("usable_rows", 0));
    let mut d = good.clone();
    d.exponents[0] = 5000;
    assert_eq!(field(TriangleState::try_from(d)), ("exponents", 0));
    let mut d = good.clone();
    d.kind = "cross-product".into();
    assert_eq!(field(TriangleState::try_from(d)), ("kind", 0));
    let mut d = good.clone();
    d.format = "something else".into();
    assert_eq!(field(TriangleState::try_from(d)), ("format", 0));
    let mut d = good.clone();
    d.targets = 0;
    assert!(matches!(
        TriangleState::try_from(d),
        Err(Error::InvalidParameter {
            name: "targets",
            ..
        })
    ));
    // A cross-product state that is not symmetric.
    let cross = blockwise(
        CrossProductState::new(2, 1, true).expect("state"),
        &x,
        &y,
        None,
        2,
    )
    .expect("absorb");
    let mut d = StateData::from(cross);
    d.matrix[1] += 1.0;
    assert!(matches!(
        CrossProductState::try_from(d),
        Err(Error::InvalidState {
            field: "matrix",
            index: 3,
            ..
        })
    ));
    // Read directly, a corrupted state fails with the format's error.
    let mut d = good;
    d.weight = -1.0;
    let text = serde_json::to_string(&d).expect("write");
    assert!(serde_json::from_str::<TriangleState>(&text).is_err());
}

/// Reference: the in-memory `Svd` solver (minimum norm) and `Ridge` with
/// the augmented QR, on the same data; a duplicated column makes the
/// design rank deficient.
#[test]
fn min_norm_and_ridge_finishes_match_in_memory_solvers() {
    use leastline::{Ridge, RidgeFactorization, Svd};
    let mut rng = gen::rng(61);
    let (mut x, y) = problem(&mut rng, 240, 4, 1);
    let y1 = y.column(0).to_owned();
    for deficient in [false, true] {
        if deficient {
            let c = x.column(0).mapv(|v| 2.0 * v);
            x.column_mut(3).assign(&c);
        }
        let state = blockwise(
            TriangleState::new(4, 1, true).expect("state"),
            &x,
            &y,
            None,
            9,
        )
        .expect("absorb");
        let problem = Problem::new(x.view(), y1.view()).expect("problem");
        let svd = Svd::new().fit(&problem).expect("svd");
        let mn = &state.finish_min_norm(None).expect("min norm")[0];
        assert_eq!(mn.report.rank, svd.report.rank);
        assert_eq!(mn.report.rank, Some(if deficient { 3 } else { 4 }));
        let d = shared_digits(mn, &svd);
        assert!(d >= 12.0, "min norm (deficient {deficient}): {d:.2} digits");
        let rss = digits(
            mn.report.residual_sum_of_squares,
            svd.report.residual_sum_of_squares,
        );
        assert!(rss >= 10.0, "min-norm RSS: {rss:.2} digits");
        if deficient {
            assert!(matches!(
                state.finish(),
                Err(Error::RankDeficient { rank: 3, .. })
            ));
        }
        for lambda in [1e-3, 1.0, 250.0, 1e6] {
            // A tiny penalty on a deficient design is ill-conditioned
            // (condition about s_max / sqrt(lambda)): both solvers lose
            // digits there, so compare at penalties it does not dominate.
            if deficient && lambda < 1.0 {
                continue;
            }
            let ridge = Ridge::new(lambda)
                .with_standardize(false)
                .with_factorization(RidgeFactorization::AugmentedQr)
                .fit(&problem)
                .expect("ridge");
            let st = &state.finish_ridge(lambda).expect("ridge state")[0];
            let d = shared_digits(st, &ridge);
            assert!(d >= 12.0, "ridge {lambda} (deficient {deficient}): {d:.2}");
            assert_eq!(st.report.penalty, lambda);
            let rss = digits(
                st.report.residual_sum_of_squares,
                ridge.report.residual_sum_of_squares,
            );
            assert!(rss >= 10.0, "ridge {lambda} RSS: {rss:.2} digits");
        }
    }
    let state = TriangleState::new(4, 1, true).expect("state");
    assert!(matches!(
        state.finish_ridge(-1.0),
        Err(Error::InvalidParameter { .. })
    ));
}

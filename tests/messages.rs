//! What people read: error messages and the printed summary use plain
//! numbers, say that indices count from 0, name columns where names were
//! given, and never print a rounded-away p-value as zero.

use leastline::ndarray::{array, Array1, Array2};
use leastline::{Cholesky, Error, Inference, Problem, Qr, Solver};

/// No run of ten or more digits (a number printed with all 17 of them).
fn no_long_digit_runs(text: &str) -> bool {
    let mut run = 0;
    for c in text.chars() {
        run = if c.is_ascii_digit() { run + 1 } else { 0 };
        if run >= 10 {
            return false;
        }
    }
    true
}

/// A design whose third column is the sum of the first two (exactly, in
/// binary), with a fourth that is constant.
fn dependent_design() -> (Array2<f64>, Array1<f64>) {
    let x = Array2::from_shape_fn((9, 4), |(i, j)| {
        let a = i as f64;
        let b = ((i * 5) % 7) as f64;
        match j {
            0 => a,
            1 => b,
            2 => a + b,
            _ => 4.0,
        }
    });
    let y = Array1::from_shape_fn(9, |i| 1.0 + 0.5 * i as f64 + ((i * 3) % 4) as f64);
    (x, y)
}

#[test]
fn the_rank_deficient_error_says_which_column_combines_which() {
    let (x, y) = dependent_design();
    let problem = Problem::new(x.view(), y.view()).unwrap();
    for solver in [&Qr::new() as &dyn Solver, &Cholesky::new()] {
        let err = solver.fit(&problem).unwrap_err();
        let Error::RankDeficient {
            dependent,
            combinations,
            ..
        } = &err
        else {
            panic!("{}: {err}", solver.name());
        };
        assert_eq!(dependent, &vec![2, 3], "{}", solver.name());
        assert_eq!(combinations, &vec![vec![0, 1], vec![]], "{}", solver.name());
        let text = err.to_string();
        assert!(
            text.contains("column 2 is a combination of columns 0 and 1"),
            "{text}"
        );
        assert!(
            text.contains("column 3 is constant beside the intercept"),
            "{text}"
        );
        assert!(text.contains("count from 0"), "{text}");
        assert!(no_long_digit_runs(&text), "{text}");
    }
    // With names, each column is named beside its index.
    let named = Problem::builder(x.view(), y.view())
        .with_names(["hours", "crates", "total", "shift"])
        .build()
        .unwrap();
    let text = Qr::new().fit(&named).unwrap_err().to_string();
    assert!(
        text.contains(
            r#"column 2 ("total") is a combination of columns 0 ("hours") and 1 ("crates")"#
        ),
        "{text}"
    );
}

#[test]
fn a_bad_value_is_named_by_row_and_column_name() {
    let mut x = Array2::from_shape_fn((6, 2), |(i, j)| (i + j) as f64);
    x[[4, 1]] = f64::NAN;
    let y = array![1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
    let err = Problem::builder(x.view(), y.view())
        .with_names(["kiln_temp", "humidity"])
        .build()
        .unwrap_err();
    assert!(matches!(
        &err,
        Error::NonFinite { row: 4, column: Some(1), column_name: Some(name), .. } if name == "humidity"
    ));
    let text = err.to_string();
    assert!(text.contains(r#"row 4, column 1 ("humidity")"#), "{text}");
    assert!(text.contains("count from 0"), "{text}");
    // Without names, the index alone.
    let text = Problem::new(x.view(), y.view()).unwrap_err().to_string();
    assert!(text.contains("row 4, column 1 (rows"), "{text}");
}

#[test]
fn parameters_print_as_people_write_numbers() {
    let (x, y) = (array![[1.0], [2.0], [3.0]], array![1.0, 2.0, 2.5]);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let err = Qr::new()
        .with_rank_tolerance(-0.1)
        .fit(&problem)
        .unwrap_err();
    let text = err.to_string();
    assert!(text.contains("= -0.1 "), "{text}");
    let err = Cholesky::new()
        .with_min_digits(2.824036625785946e9)
        .fit(&problem)
        .unwrap_err();
    let text = err.to_string();
    assert!(text.contains("2.824e9"), "{text}");
    assert!(no_long_digit_runs(&text), "{text}");
}

#[test]
fn a_wrong_count_of_names_speaks_of_coefficients() {
    let (x, y) = (
        array![[1.0, 0.0], [2.0, 1.0], [3.0, 0.0], [4.0, 1.0]],
        array![1.0, 2.0, 2.5, 4.0],
    );
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let err = Inference::new(&problem, &fit)
        .unwrap()
        .with_names(["a", "b", "c"])
        .unwrap_err();
    assert!(matches!(
        err,
        Error::NameCountMismatch {
            expected: 2,
            found: 3
        }
    ));
    let text = err.to_string();
    assert!(
        text.contains("3 names were given for 2 coefficients"),
        "{text}"
    );
}

/// A p-value below the range where it keeps its digits prints as a bound,
/// never as a zero.
#[test]
fn an_underflowing_p_value_prints_as_a_bound() {
    // A nearly exact line: t of the slope about 1e13.
    let x = Array2::from_shape_fn((40, 1), |(i, _)| i as f64);
    let y = Array1::from_shape_fn(40, |i| 3.0 * i as f64 + 1.0 + 1e-12 * ((i * 7) % 5) as f64);
    let problem = Problem::new(x.view(), y.view()).unwrap();
    let fit = Qr::new().fit(&problem).unwrap();
    let inference = Inference::new(&problem, &fit).unwrap();
    let slope = inference.estimates().next().unwrap();
    assert!(slope.p_value < 1e-300, "{}", slope.p_value);
    let text = inference.to_string();
    assert!(text.contains("p < 1e-300"), "{text}");
    assert!(!text.contains("0.00e0"), "{text}");
}

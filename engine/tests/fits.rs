//! The fit aggregates over multi-file Parquet and CSV tables: each group's
//! fit against the core's in-memory fits of the same rows (and an
//! independent SVD least-squares solve in nalgebra), whatever the number of
//! files or target partitions.

mod common;

use common::*;
use datafusion::prelude::*;
use leastline::{Cholesky, Error, Problem, Ridge, Solver};

const SQL: &str = "SELECT grp, lsq_fit(growth, light, humidity, vent) AS fit \
                   FROM readings GROUP BY grp";

const FITTED: [&str; 4] = ["alder", "birch", "cedar", "dogwood"];

fn check_groups(what: &str, rows: &[Row], got: &std::collections::BTreeMap<String, Got>) {
    assert_eq!(got.len(), GROUPS.len(), "{what}: {got:?}");
    for g in FITTED {
        let fit = reference(rows, g).unwrap();
        let r = &got[g];
        assert_eq!(r.columns, COLUMNS, "{what}");
        // Standard errors against the core's in-memory inference of the
        // same rows (the classical covariance), to 12 digits.
        let (x, y, _) = common::group_arrays(rows, g);
        let problem = Problem::builder(x.view(), y.view())
            .with_names(COLUMNS)
            .build()
            .unwrap();
        let inference = leastline::Inference::new(&problem, &fit).unwrap();
        let se = r.std_errors.as_ref().expect("standard errors");
        assert_eq!(se.len(), inference.coefficients.len(), "{what}");
        for (a, b) in se.iter().zip(&inference.coefficients) {
            assert!(
                digits(*a, b.std_error) >= 12.0,
                "{what} {g}: se {a} vs {}",
                b.std_error
            );
        }
        assert_agrees(&format!("{what} {g}"), r, &fit, 13.0);
    }
    // The rank-deficient group is refused as a value, with its rank, the
    // core's reason naming the dependent column, and no coefficients.
    let elm = &got["elm"];
    let refusal = elm.refusal.as_deref().unwrap_or_default();
    assert!(matches!(
        reference(rows, "elm"),
        Err(Error::RankDeficient { rank: 2, .. })
    ));
    assert!(
        refusal.contains("rank deficient") && refusal.contains("vent"),
        "{what}: {refusal}"
    );
    assert_eq!(elm.rank, Some(2), "{what}");
    assert_eq!(elm.rows_used, 310, "{what}");
    assert_eq!(elm.coefficients, None, "{what}");
}

#[tokio::test]
async fn parquet_and_csv_groups_match_in_memory_fits_at_any_partitioning() {
    let rows = readings(7);
    let dir = tempfile::tempdir().unwrap();
    let three = split(&rows, &[0.55, 0.1, 0.35]);
    let one = split(&rows, &[1.0]);
    write_parquet(&dir.path().join("pq3"), &three, 230);
    write_parquet(&dir.path().join("pq1"), &one, 400);
    write_csv(&dir.path().join("csv3"), &three);
    let mut answers = Vec::new();
    for tp in [1, 3, 8] {
        for table in ["pq3", "pq1", "csv3"] {
            let ctx = context(tp);
            let path = dir.path().join(table);
            if table.starts_with("pq") {
                register_parquet(&ctx, &path).await;
            } else {
                register_csv(&ctx, &path).await;
            }
            let got = query(&ctx, SQL).await;
            check_groups(&format!("{table} target_partitions={tp}"), &rows, &got);
            answers.push(got);
        }
    }
    // Every partitioning gives the same answer to 13 digits (rounding may
    // differ in the last bits with the order of merges).
    for other in &answers[1..] {
        for g in FITTED {
            let (a, b) = (&other[g], &answers[0][g]);
            for (x, y) in a
                .coefficients
                .as_ref()
                .unwrap()
                .iter()
                .zip(b.coefficients.as_ref().unwrap())
            {
                assert!(digits(*x, *y) >= 13.0, "{g}: {x} vs {y}");
            }
        }
    }
}

/// An independent check of the aggregate: nalgebra's SVD least-squares
/// solve of `[1, x] b = y` for each group.
#[tokio::test]
async fn coefficients_agree_with_an_independent_svd_solve() {
    let rows = readings(11);
    let dir = tempfile::tempdir().unwrap();
    write_parquet(dir.path(), &split(&rows, &[0.3, 0.7]), 500);
    let ctx = context(3);
    register_parquet(&ctx, dir.path()).await;
    let got = query(&ctx, SQL).await;
    for g in FITTED {
        let (x, y, _) = group_arrays(&rows, g);
        let n = x.nrows();
        let a = nalgebra::DMatrix::from_fn(n, 4, |i, j| if j == 0 { 1.0 } else { x[(i, j - 1)] });
        let b = nalgebra::DVector::from_iterator(n, y.iter().copied());
        let sol = a.svd(true, true).solve(&b, 1e-300).unwrap();
        let r = &got[g];
        // The SVD of the uncentered design loses about log10(cond) digits
        // (cond of [1, x] is near 1e4 here): 10 digits is its own floor.
        assert!(digits(r.intercept.unwrap(), sol[0]) >= 10.0, "{g}");
        for (j, c) in r.coefficients.as_ref().unwrap().iter().enumerate() {
            assert!(
                digits(*c, sol[j + 1]) >= 10.0,
                "{g} column {j}: {c} vs {}",
                sol[j + 1]
            );
        }
    }
}

#[tokio::test]
async fn options_weights_no_intercept_ridge_and_cross_products() {
    let rows = readings(5);
    let dir = tempfile::tempdir().unwrap();
    write_parquet(dir.path(), &split(&rows, &[0.2, 0.45, 0.35]), 300);
    let ctx = context(4);
    register_parquet(&ctx, dir.path()).await;
    let run = |opts: &'static str| {
        let ctx = ctx.clone();
        async move {
            query(
                &ctx,
                &format!(
                    "SELECT grp, lsq_fit_with('{opts}', growth, trust, light, humidity, vent) \
                     FROM readings GROUP BY grp"
                ),
            )
            .await
        }
    };
    for g in FITTED {
        let (x, y, w) = group_arrays(&rows, g);
        let weighted = |intercept| {
            Problem::builder(x.view(), y.view())
                .with_weights(w.view())
                .with_intercept(intercept)
                .build()
                .unwrap()
        };
        let p = weighted(true);
        let got = run("").await;
        assert_agrees(g, &got[g], &leastline::Qr::new().fit(&p).unwrap(), 13.0);

        let got = run("intercept=no").await;
        let fit = leastline::Qr::new().fit(&weighted(false)).unwrap();
        assert_eq!(got[g].intercept, None);
        let mut with_intercept = got[g].clone();
        with_intercept.intercept = Some(0.0);
        assert_eq!(fit.model.intercept(), 0.0);
        assert_agrees(g, &with_intercept, &fit, 13.0);

        // Cholesky of the cross products: the accuracy of the normal
        // equations (about 16 - 2 log10(cond) digits; cond < 1e3 here).
        let got = run("state=cross-product").await;
        let fit = Cholesky::new().fit(&p).unwrap();
        assert_agrees(g, &got[g], &fit, 10.0);

        let got = run("ridge=3.5").await;
        let fit = Ridge::new(3.5).fit(&p).unwrap();
        let r = &got[g];
        assert_eq!(r.refusal, None);
        for (a, b) in r
            .coefficients
            .as_ref()
            .unwrap()
            .iter()
            .zip(fit.model.coefficients())
        {
            assert!(digits(*a, *b) >= 12.0, "{g} ridge: {a} vs {b}");
        }
        assert!(digits(r.intercept.unwrap(), fit.model.intercept()) >= 12.0);
        assert!(digits(r.residual_ss.unwrap(), fit.report.residual_sum_of_squares) >= 12.0);
    }
}

#[tokio::test]
async fn a_nan_refuses_its_group_and_names_the_column() {
    let mut rows = readings(3);
    let at = rows.iter().position(|r| r.group == "birch").unwrap();
    rows[at].x[1] = f64::NAN;
    let dir = tempfile::tempdir().unwrap();
    write_parquet(dir.path(), &split(&rows, &[0.5, 0.5]), 200);
    let ctx = context(3);
    register_parquet(&ctx, dir.path()).await;
    let got = query(&ctx, SQL).await;
    let refusal = got["birch"].refusal.clone().unwrap();
    assert!(
        refusal.contains("NaN") && refusal.contains("humidity"),
        "{refusal}"
    );
    assert_eq!(got["birch"].coefficients, None);
    let fit = reference(&rows, "alder").unwrap();
    assert_agrees("alder beside a refused group", &got["alder"], &fit, 13.0);
}

#[tokio::test]
async fn nulls_are_skipped_and_a_group_without_rows_is_refused() {
    let ctx = context(2);
    ctx.sql(
        "CREATE TABLE t (g TEXT, y DOUBLE, a DOUBLE, b INT) AS VALUES \
         ('p', 1.0, 1.0, 2), ('p', 2.5, 2.0, 1), ('p', NULL, 7.0, 7), ('p', 2.0, 3.0, 5), \
         ('p', 4.5, 4.0, 3), ('p', 5.0, 6.0, NULL), ('q', NULL, 1.0, 1)",
    )
    .await
    .unwrap()
    .collect()
    .await
    .unwrap();
    let got = query(&ctx, "SELECT g, lsq_fit(y, a, b) FROM t GROUP BY g").await;
    let x = leastline::ndarray::array![[1.0, 2.0], [2.0, 1.0], [3.0, 5.0], [4.0, 3.0]];
    let y = leastline::ndarray::array![1.0, 2.5, 2.0, 4.5];
    let fit = leastline::Qr::new()
        .fit(&Problem::new(x.view(), y.view()).unwrap())
        .unwrap();
    assert_agrees("p", &got["p"], &fit, 13.0);
    assert!(got["q"].refusal.as_deref().unwrap().contains("no row"));
    assert_eq!(got["q"].rows_used, 0);
}

#[tokio::test]
async fn the_dataframe_api_gives_the_sql_answer() {
    let rows = readings(9);
    let dir = tempfile::tempdir().unwrap();
    write_parquet(dir.path(), &split(&rows, &[0.6, 0.4]), 256);
    let ctx = context(3);
    register_parquet(&ctx, dir.path()).await;
    let sql = query(&ctx, SQL).await;
    let xs = COLUMNS.iter().map(|c| col(*c)).collect();
    let batches = ctx
        .table("readings")
        .await
        .unwrap()
        .aggregate(
            vec![col("grp")],
            vec![leastline_engine::lsq_fit(col("growth"), xs)],
        )
        .unwrap()
        .collect()
        .await
        .unwrap();
    let df = read(&batches);
    for g in FITTED {
        let fit = reference(&rows, g).unwrap();
        assert_agrees(g, &df[g], &fit, 13.0);
        assert_agrees(g, &sql[g], &fit, 13.0);
    }
}

/// With the partial aggregation skipped (many groups, a probe of one row),
/// DataFusion turns rows into states one by one; the answer is the same.
#[tokio::test]
async fn skipped_partial_aggregation_gives_the_same_fits() {
    let rows = readings(13);
    let dir = tempfile::tempdir().unwrap();
    write_parquet(dir.path(), &split(&rows, &[0.5, 0.5]), 300);
    let config = SessionConfig::new()
        .with_target_partitions(4)
        .set_str(
            "datafusion.execution.skip_partial_aggregation_probe_rows_threshold",
            "1",
        )
        .set_str(
            "datafusion.execution.skip_partial_aggregation_probe_ratio_threshold",
            "0.0",
        );
    let state = leastline_engine::session_state()
        .with_config(config)
        .build();
    let ctx = SessionContext::new_with_state(state);
    register_parquet(&ctx, dir.path()).await;
    // A ratio threshold of 0 makes every partial aggregate give up after
    // its first probe row: rows reach the final aggregate as one-row states.
    let got = query(&ctx, SQL).await;
    for g in FITTED {
        assert_agrees(g, &got[g], &reference(&rows, g).unwrap(), 13.0);
    }
}

/// `cargo build` of the core does not compile DataFusion.
#[test]
fn the_core_package_does_not_depend_on_the_engine() {
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
    let out = std::process::Command::new(cargo)
        .args([
            "tree",
            "--offline",
            "-p",
            "leastline",
            "-e",
            "normal,build",
            "--prefix",
            "none",
        ])
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let tree = String::from_utf8(out.stdout).unwrap();
    assert!(tree.starts_with("leastline v"), "{tree}");
    assert_eq!(
        tree.lines().filter(|l| l.contains("datafusion")).count(),
        0,
        "{tree}"
    );
}

//! The fit aggregate on Ballista: a scheduler and an executor started
//! in-process on the loopback address (standalone mode), both built from
//! a session state that registers the aggregates; the client registers them
//! again (Ballista's client state replaces the aggregate list). The
//! answers equal DataFusion's in-process answers and the core's fits.

mod common;

use ballista::prelude::*;
use common::*;
use datafusion::prelude::*;

const SQL: &str = "SELECT grp, lsq_fit(growth, light, humidity, vent) AS fit \
                   FROM readings GROUP BY grp";

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn standalone_cluster_gives_the_in_process_answers() {
    let rows = readings(21);
    let dir = tempfile::tempdir().unwrap();
    write_parquet(dir.path(), &split(&rows, &[0.4, 0.15, 0.45]), 250);

    let config = SessionConfig::new_with_ballista().with_target_partitions(3);
    let state = leastline_engine::session_state()
        .with_config(config)
        .build();
    let cluster = SessionContext::standalone_with_state(state).await.unwrap();
    leastline_engine::register(&cluster);
    register_parquet(&cluster, dir.path()).await;
    let remote = query(&cluster, SQL).await;

    let local_ctx = context(3);
    register_parquet(&local_ctx, dir.path()).await;
    let local = query(&local_ctx, SQL).await;

    assert_eq!(remote.len(), GROUPS.len());
    for (g, _) in GROUPS {
        let (r, l) = (&remote[g], &local[g]);
        assert_eq!(r.refusal, l.refusal, "{g}");
        assert_eq!((r.rows_used, r.rank), (l.rows_used, l.rank), "{g}");
        match reference(&rows, g) {
            Ok(fit) => {
                assert_agrees(&format!("ballista {g}"), r, &fit, 13.0);
                assert_agrees(&format!("in-process {g}"), l, &fit, 13.0);
            }
            Err(e) => assert_eq!(r.refusal.as_deref(), Some(e.to_string().as_str()), "{g}"),
        }
    }
}

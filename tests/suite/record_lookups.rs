//! The event queries name only the filters given, and each database answers them from an
//! index of its own rather than by reading the record: checked on the plans the databases
//! themselves report (SQLite's `EXPLAIN QUERY PLAN`, PostgreSQL's `EXPLAIN` with sequential
//! scans priced out, since a test database is small enough that a scan would win).

use cutpoints::store::events::{EventFilter, MADE_STALE_SQL, select_sql};
use sqlx::Row;

use crate::helpers::{Backend, TestApp};

/// The plan the database reports for `sql` with `values` bound, as one text.
async fn plan(app: &TestApp, sql: &str, values: &[String]) -> String {
    let mut conn = app.store.pool().acquire().await.unwrap();
    let explain = match app.backend {
        Backend::Sqlite => format!("EXPLAIN QUERY PLAN {sql}"),
        Backend::Postgres => {
            sqlx::query("SET enable_seqscan = off")
                .execute(&mut *conn)
                .await
                .unwrap();
            format!("EXPLAIN {sql}")
        }
    };
    let mut q = sqlx::query(sqlx::AssertSqlSafe(explain)).bind(0_i64);
    for v in values {
        q = q.bind(v.as_str());
    }
    let rows = q.bind(100_i64).fetch_all(&mut *conn).await.unwrap();
    let column = match app.backend {
        Backend::Sqlite => "detail",
        Backend::Postgres => "QUERY PLAN",
    };
    rows.iter()
        .map(|r| r.try_get::<String, _>(column).unwrap())
        .collect::<Vec<_>>()
        .join("\n")
}

crate::on_both_backends! {
    async fn each_event_filter_is_answered_from_its_own_index(app) {
        let cases = [
            ("events_subject", EventFilter { subject: "metric:docks.peak".into(), ..EventFilter::default() }),
            ("events_action", EventFilter { action: "review.refused".into(), ..EventFilter::default() }),
            ("events_actor", EventFilter { actor: "hana".into(), ..EventFilter::default() }),
        ];
        for (index, filter) in cases {
            let (sql, values) = select_sql(&filter);
            assert!(!sql.contains("= ''"), "no catch-all conditions: {sql}");
            let p = plan(&app, &sql, &values).await;
            assert!(p.contains(index), "{index} for {sql}:\n{p}");
        }
        // No filter: the record in order of seq, from its primary key.
        let (sql, values) = select_sql(&EventFilter::default());
        assert_eq!(sql.matches('$').count(), 2, "{sql}");
        assert!(values.is_empty());
        let p = plan(&app, MADE_STALE_SQL, &[]).await;
        assert!(p.contains("events_made_stale"), "{p}");
    }
}

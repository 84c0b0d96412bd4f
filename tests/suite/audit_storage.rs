//! The event record under load and under a restricted database role: appends from many tasks
//! and two app instances never fork the chain; the app's PostgreSQL role cannot change it.

use std::sync::Arc;

use cutpoints::audit::{GENESIS_HASH, Verifier};
use cutpoints::ops::metrics::{NewMetric, create};
use cutpoints::store::Store;

use crate::helpers::{Backend, TestApp};
use crate::on_both_backends;

on_both_backends! {
    async fn two_instances_on_one_database_append_one_linear_chain(app) {
        let root = app.add_user("root", "admin").await;
        // A second instance: its own connection pool on the same database.
        let other = Store::open(&app.store_url).await.unwrap();
        let stores = [app.store.clone(), other];
        let barrier = Arc::new(tokio::sync::Barrier::new(40));
        let mut tasks = Vec::new();
        for i in 0..40 {
            let store = stores[i % 2].clone();
            let root = root.clone();
            let barrier = barrier.clone();
            tasks.push(tokio::spawn(async move {
                barrier.wait().await;
                let input = NewMetric { key: format!("m{i:02}"), name: format!("M {i}"), ..Default::default() };
                create(&store, &root, &input).await
            }));
        }
        for t in tasks {
            t.await.unwrap().expect("every append succeeds");
        }
        // The signing key's registration, the admin, and forty metrics.
        let events = app.events().await;
        assert_eq!(events.len(), 42);
        let mut v = Verifier::new(None);
        for e in &events {
            v.push(e).unwrap_or_else(|b| panic!("{b}"));
        }
        let (count, head) = v.finish().unwrap();
        assert_eq!(count, 42);
        assert_ne!(head, GENESIS_HASH);
        assert_eq!(cutpoints::store::events::verify(&app.store, None).await.unwrap(), Ok((42, head)));
    }

    async fn serving_without_migrations_refuses_an_unmigrated_database(app) {
        let fresh_url = match app.backend {
            Backend::Sqlite => {
                let dir = tempfile::tempdir().unwrap();
                let url = format!("sqlite://{}", dir.path().join("empty.db").display());
                std::mem::forget(dir);
                url
            }
            Backend::Postgres => {
                let name = format!("cutpoints_empty_{}", std::process::id());
                let _ = sqlx::query(sqlx::AssertSqlSafe(format!("DROP DATABASE IF EXISTS {name}"))).execute(app.store.pool()).await;
                sqlx::query(sqlx::AssertSqlSafe(format!("CREATE DATABASE {name}"))).execute(app.store.pool()).await.unwrap();
                app.store_url.rsplit_once('/').map(|(base, _)| format!("{base}/{name}")).unwrap()
            }
        };
        let e = Store::open_migrated(&fresh_url, Default::default()).await.unwrap_err();
        assert!(e.to_string().contains("cutpoints migrate"), "{e}");
        assert!(Store::open_migrated(&app.store_url, Default::default()).await.is_ok());
        if app.backend == Backend::Postgres {
            let name = fresh_url.rsplit('/').next().unwrap();
            let _ = sqlx::query(sqlx::AssertSqlSafe(format!("DROP DATABASE IF EXISTS {name} WITH (FORCE)"))).execute(app.store.pool()).await;
        }
    }
}

/// The role of docs/postgres-app-role.sql, under a name of this test's own.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_postgres_app_role_can_append_but_not_change_the_record() {
    let Some(app) = TestApp::spawn(Backend::Postgres).await else {
        return;
    };
    app.add_user("root", "admin").await;
    let role = format!("cp_app_{}", std::process::id());
    let _ = sqlx::query(sqlx::AssertSqlSafe(format!("DROP OWNED BY {role}")))
        .execute(app.store.pool())
        .await;
    let _ = sqlx::query(sqlx::AssertSqlSafe(format!("DROP ROLE IF EXISTS {role}")))
        .execute(app.store.pool())
        .await;
    let script = include_str!("../../docs/postgres-app-role.sql").replace("cutpoints_app", &role);
    for statement in script
        .lines()
        .filter(|l| !l.trim_start().starts_with("--"))
        .collect::<Vec<_>>()
        .join("\n")
        .split(';')
        .map(str::trim)
        .filter(|s| !s.is_empty())
    {
        sqlx::query(sqlx::AssertSqlSafe(statement.to_string()))
            .execute(app.store.pool())
            .await
            .unwrap_or_else(|e| panic!("{statement}: {e}"));
    }
    // Connect as the app role (the test server trusts local connections).
    let (scheme_user, rest) = app.store_url.split_once('@').unwrap();
    let scheme = scheme_user.split("://").next().unwrap();
    let as_app = format!("{scheme}://{role}@{rest}");
    let store = Store::open_migrated(&as_app, Default::default())
        .await
        .expect("the app role opens the migrated database");
    let root = cutpoints::store::users::get(&store, "root").await.unwrap();
    create(
        &store,
        &root,
        &NewMetric {
            key: "k".into(),
            name: "K".into(),
            ..Default::default()
        },
    )
    .await
    .expect("the app role writes and appends events");
    for sql in [
        "UPDATE events SET actor = 'mallory'",
        "DELETE FROM events",
        "TRUNCATE events",
        "DROP TRIGGER events_no_update ON events",
        "ALTER TABLE events DISABLE TRIGGER ALL",
    ] {
        let e = sqlx::query(sqlx::AssertSqlSafe(sql.to_string()))
            .execute(store.pool())
            .await
            .expect_err(sql);
        let text = e.to_string();
        assert!(
            text.contains("permission denied") || text.contains("must be owner"),
            "{sql}: {text}"
        );
    }
    assert_eq!(
        cutpoints::store::events::verify(&store, None)
            .await
            .unwrap()
            .unwrap()
            .0,
        3
    );
    store.close().await;
    let _ = sqlx::query(sqlx::AssertSqlSafe(format!("DROP OWNED BY {role}")))
        .execute(app.store.pool())
        .await;
    let _ = sqlx::query(sqlx::AssertSqlSafe(format!("DROP ROLE IF EXISTS {role}")))
        .execute(app.store.pool())
        .await;
}

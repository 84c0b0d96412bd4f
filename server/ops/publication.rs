//! Reading the published set's history: which metrics moved between two set revisions.

use serde::Serialize;

use super::OpResult;
use crate::domain::proposal::cuts_object;
use crate::domain::{Direction, Timestamp};
use crate::store::versions::{self, VersionRecord};
use std::sync::Arc;

use crate::publish::Publisher;
use crate::publish::document::Rendered;
use crate::store::{Store, StoreError};

/// A version as a change list shows it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct ChangeSide {
    pub version: i64,
    #[schema(value_type = Direction)]
    pub direction: &'static str,
    /// The four cut points by name.
    pub cuts: std::collections::BTreeMap<&'static str, f64>,
    pub effective_from: Timestamp,
}

fn side(v: &VersionRecord) -> ChangeSide {
    ChangeSide {
        version: v.number,
        direction: v.content.direction().as_str(),
        cuts: cuts_object(&v.content.cuts),
        effective_from: v.effective_from,
    }
}

/// A metric whose version differs between two set revisions.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Change {
    pub metric: String,
    /// `added` (no version before), `changed`, or `removed` (never happens: versions are
    /// never withdrawn, but the list says so if it ever did).
    pub change: &'static str,
    pub old: Option<ChangeSide>,
    pub new: Option<ChangeSide>,
}

/// The time at which the set reached `revision` (None for revision 0: before anything).
async fn time_of(conn: &mut crate::store::Db, revision: i64) -> OpResult<Option<Timestamp>> {
    if revision == 0 {
        return Ok(None);
    }
    let times: Vec<Timestamp> = sqlx::query_scalar(
        "SELECT CASE WHEN approved_at > effective_from THEN approved_at ELSE effective_from END AS t \
         FROM versions ORDER BY t LIMIT $1",
    )
    .bind(revision)
    .fetch_all(&mut *conn)
    .await
    .map_err(StoreError::from)?;
    Ok(times.last().copied())
}

async fn set_at(
    conn: &mut crate::store::Db,
    t: Option<Timestamp>,
) -> OpResult<Vec<(String, VersionRecord)>> {
    match t {
        Some(t) => Ok(versions::in_force_all(conn, t, t).await?),
        None => Ok(Vec::new()),
    }
}

pub async fn changes(store: &Store, from: i64, to: i64) -> OpResult<Vec<Change>> {
    let mut conn = store.read().await?;
    let t_from = time_of(&mut conn, from).await?;
    let t_to = time_of(&mut conn, to).await?;
    let old: std::collections::BTreeMap<String, VersionRecord> =
        set_at(&mut conn, t_from).await?.into_iter().collect();
    let new: std::collections::BTreeMap<String, VersionRecord> =
        set_at(&mut conn, t_to).await?.into_iter().collect();
    let mut out = Vec::new();
    for (key, n) in &new {
        match old.get(key) {
            Some(o) if o.number == n.number => {}
            Some(o) => out.push(Change {
                metric: key.clone(),
                change: "changed",
                old: Some(side(o)),
                new: Some(side(n)),
            }),
            None => out.push(Change {
                metric: key.clone(),
                change: "added",
                old: None,
                new: Some(side(n)),
            }),
        }
    }
    for (key, o) in &old {
        if !new.contains_key(key) {
            out.push(Change {
                metric: key.clone(),
                change: "removed",
                old: Some(side(o)),
                new: None,
            });
        }
    }
    out.sort_by(|a, b| a.metric.cmp(&b.metric));
    Ok(out)
}

/// Every metric key in the register.
pub async fn metric_keys(store: &Store) -> OpResult<std::collections::HashSet<String>> {
    let keys: Vec<String> = sqlx::query_scalar("SELECT key FROM metrics")
        .fetch_all(&mut store.read().await?)
        .await
        .map_err(StoreError::from)?;
    Ok(keys.into_iter().collect())
}

/// The published set in force now, rendered once per set revision.
pub async fn current(publisher: &Publisher, store: &Store) -> OpResult<Arc<Rendered>> {
    Ok(publisher.current(store).await?)
}

/// The published set at the requested times, or narrowed to one metric.
pub async fn at(
    publisher: &Publisher,
    store: &Store,
    as_of: Option<Timestamp>,
    known_at: Option<Timestamp>,
    only: Option<&str>,
) -> OpResult<Arc<Rendered>> {
    Ok(publisher.at(store, as_of, known_at, only).await?)
}

/// The signing keys, current and retired.
pub async fn keys(store: &Store) -> OpResult<Vec<crate::publish::signing::PublicKey>> {
    Ok(crate::publish::signing::registry(store).await?)
}

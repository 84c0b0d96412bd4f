//! Publishing the approved set: what is in force, encoded, digested, signed, and cached once
//! per set revision so that serving it costs no more than sending bytes.

pub mod document;
mod publisher;
pub mod signing;
pub mod withhold;

use crate::domain::Timestamp;
use crate::store::{Store, StoreResult, events, versions};
use document::SetContent;
pub use publisher::{FRESHNESS, Publisher, RENDER_BUDGET};
pub use signing::Signer;

/// Reads what the whole set holds at `as_of` as recorded by `known_at`.
pub async fn content(
    store: &Store,
    as_of: Timestamp,
    known_at: Timestamp,
    requested: (Option<Timestamp>, Option<Timestamp>),
) -> StoreResult<SetContent> {
    let mut conn = store.read().await?;
    let state = versions::set_state(&mut conn, as_of, known_at).await?;
    let mut in_force = versions::in_force_all(&mut conn, as_of, known_at).await?;
    // Byte order of keys, whatever the database's collation.
    in_force.sort_by(|a, b| a.0.cmp(&b.0));
    let withheld = withhold_unapproved(&mut conn, &mut in_force).await?;
    // A withheld metric has a version in force (one that does not match its record): it is
    // named in meta.withheld, not among the metrics without a version.
    let keys: std::collections::HashSet<&str> = in_force
        .iter()
        .map(|(k, _)| k.as_str())
        .chain(withheld.iter().map(|w| w.metric.as_str()))
        .collect();
    // The set is a function of its revision: metrics without a version are those that
    // existed when the revision took effect.
    let mut without: Vec<String> = match state.1 {
        Some(since) => versions::metrics_existing_at(&mut conn, since)
            .await?
            .into_iter()
            .filter(|k| !keys.contains(k.as_str()))
            .collect(),
        None => Vec::new(),
    };
    without.sort();
    assemble(&mut conn, state, in_force, withheld, without, requested).await
}

/// A set's content from its parts, with the chain's head as it was when its revision took
/// effect.
async fn assemble(
    conn: &mut crate::store::Db,
    (set_revision, in_force_since): (i64, Option<Timestamp>),
    versions: Vec<(String, versions::VersionRecord)>,
    withheld: Vec<withhold::Withheld>,
    metrics_without_version: Vec<String>,
    requested: (Option<Timestamp>, Option<Timestamp>),
) -> StoreResult<SetContent> {
    let audit_head = match in_force_since {
        Some(since) => events::head_at(conn, since).await?,
        None => crate::audit::GENESIS_HASH.to_string(),
    };
    Ok(SetContent {
        set_revision,
        in_force_since,
        audit_head,
        metrics_without_version,
        withheld,
        versions,
        as_of: requested.0,
        known_at: requested.1,
    })
}

/// Takes out of `in_force` every version that does not match the event that approved it,
/// logging each; returns them.
async fn withhold_unapproved(
    conn: &mut crate::store::Db,
    in_force: &mut Vec<(String, versions::VersionRecord)>,
) -> StoreResult<Vec<withhold::Withheld>> {
    let seqs: Vec<i64> = in_force.iter().map(|(_, v)| v.approval_seq).collect();
    let approvals = events::by_seq(conn, &seqs).await?;
    let mut withheld = Vec::new();
    in_force.retain(|(key, v)| match withhold::check(key, v, approvals.get(&v.approval_seq)) {
        Ok(()) => true,
        Err(reason) => {
            tracing::error!(metric = %key, version = v.number, %reason, "version withheld from the published set");
            withheld.push(withhold::Withheld {
                metric: key.clone(),
                version: v.number,
                reason,
            });
            false
        }
    });
    Ok(withheld)
}

/// What one metric's set holds at `as_of` as recorded by `known_at`: the whole set's entry
/// for it, read from that metric's rows (and the set's state) alone.
pub async fn content_of_one(
    store: &Store,
    as_of: Timestamp,
    known_at: Timestamp,
    requested: (Option<Timestamp>, Option<Timestamp>),
    key: &str,
) -> StoreResult<SetContent> {
    let mut conn = store.read().await?;
    let state = versions::set_state(&mut conn, as_of, known_at).await?;
    let metric = versions::metric_by_key(&mut conn, key).await?;
    let mut in_force = Vec::new();
    if let Some((id, _)) = metric
        && let Some(v) = versions::in_force(&mut conn, id, as_of, known_at).await?
    {
        in_force.push((key.to_string(), v));
    }
    let withheld = withhold_unapproved(&mut conn, &mut in_force).await?;
    let existed = match (metric, state.1) {
        (Some((_, created_at)), Some(since)) => created_at <= since,
        _ => false,
    };
    let without = if existed && in_force.is_empty() && withheld.is_empty() {
        vec![key.to_string()]
    } else {
        Vec::new()
    };
    assemble(&mut conn, state, in_force, withheld, without, requested).await
}

//! The approval policy, kept in the database so that every instance applies the same rule.

use super::Db;
use serde_json::json;

use super::{Actor, StoreError, StoreResult, WriteTx};

/// The allowed range of `reviewers_required`.
pub const REVIEWERS_MIN: i64 = 1;
pub const REVIEWERS_MAX: i64 = 10;

/// How many current reviewer approvals a proposal needs.
pub async fn reviewers_required(conn: &mut Db) -> StoreResult<u32> {
    let value: Option<String> =
        sqlx::query_scalar("SELECT value FROM settings WHERE name = 'reviewers_required'")
            .fetch_optional(&mut *conn)
            .await?;
    Ok(value.and_then(|v| v.parse().ok()).unwrap_or(1))
}

/// Changes `reviewers_required`, recording the change with its before and after.
pub async fn set_reviewers_required(w: &mut WriteTx, actor: &Actor, n: i64) -> StoreResult<i64> {
    if !(REVIEWERS_MIN..=REVIEWERS_MAX).contains(&n) {
        let mut p = crate::domain::Problems::default();
        p.add(
            "reviewers_required",
            format!("reviewers_required must be from {REVIEWERS_MIN} to {REVIEWERS_MAX}, got {n}"),
        );
        return Err(StoreError::Invalid(p));
    }
    let before = reviewers_required(w.conn()).await?;
    if i64::from(before) == n {
        return Ok(n);
    }
    sqlx::query(
        "INSERT INTO settings (name, value) VALUES ('reviewers_required', $1) \
         ON CONFLICT (name) DO UPDATE SET value = $1",
    )
    .bind(n.to_string())
    .execute(w.conn())
    .await?;
    w.record(
        actor,
        "policy.changed",
        "policy:approval",
        json!({"before": {"reviewers_required": before}, "after": {"reviewers_required": n}}),
    )
    .await?;
    Ok(n)
}

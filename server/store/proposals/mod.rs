//! Proposals and everything said about them: revisions, reviews, sign-offs and comments.
//! Revisions, reviews, sign-offs and comments are only ever inserted; whether a review or
//! sign-off is stale is derived (it names a revision that is no longer the latest).
//!
//! This file holds the proposal rows themselves: reading them, creating one and moving it
//! between states; `bundles` reads a proposal whole, and `inserts` writes what is said about it.

mod bundles;
mod inserts;

pub use bundles::{
    CommentRecord, ProposalBundle, ReviewRecord, RevisionRecord, SignoffRecord, bundle,
};
pub use inserts::{NewRevision, insert_comment, insert_review, insert_revision, insert_signoff};

use sqlx::any::Any;
use sqlx::{Encode, FromRow, Type};

use crate::domain::proposal::ProposalState;
use crate::domain::{Person, Timestamp};
use crate::store::rows::{self, PersonColumns, person_columns};
use crate::store::{Db, StoreResult, WriteTx, sql};

#[derive(Clone, Debug, FromRow)]
pub struct ProposalRecord {
    pub id: i64,
    pub metric_id: i64,
    pub metric_key: String,
    pub state: ProposalState,
    #[sqlx(flatten, try_from = "PersonColumns")]
    pub author: Person,
    pub created_at: Timestamp,
    pub updated_at: Timestamp,
    pub sent_back_revision: Option<i64>,
    pub closed_at: Option<Timestamp>,
    pub close_reason: String,
    pub version_number: Option<i64>,
}

macro_rules! select_proposals {
    ($rest:literal) => {
        concat!(
            "SELECT p.id, p.metric_id, m.key AS metric_key, p.state, p.created_at, p.updated_at, ",
            "p.sent_back_revision, p.closed_at, p.close_reason, p.version_number, ",
            person_columns!("a", "a"),
            " FROM proposals p JOIN metrics m ON m.id = p.metric_id JOIN users a ON a.id = p.author_id ",
            $rest
        )
    };
}

pub async fn find(conn: &mut Db, id: i64) -> StoreResult<Option<ProposalRecord>> {
    let query = sqlx::query(select_proposals!("WHERE p.id = $1")).bind(id);
    rows::optional(conn, query, rows::record).await
}

/// The metric's open proposal (draft, in review or sent back), if any.
pub async fn open_for_metric(conn: &mut Db, metric_id: i64) -> StoreResult<Option<ProposalRecord>> {
    let query = sqlx::query(select_proposals!(
        "WHERE p.metric_id = $1 AND p.state IN ('draft', 'in_review', 'sent_back')"
    ))
    .bind(metric_id);
    rows::optional(conn, query, rows::record).await
}

/// Every proposal of a metric, newest first.
pub async fn for_metric(conn: &mut Db, metric_id: i64) -> StoreResult<Vec<ProposalRecord>> {
    let query = sqlx::query(select_proposals!(
        "WHERE p.metric_id = $1 ORDER BY p.id DESC"
    ))
    .bind(metric_id);
    rows::all(conn, query, rows::record).await
}

/// Proposals in the given states, least recently touched first (the inboxes filter further).
pub async fn in_states(
    conn: &mut Db,
    states: &[ProposalState],
) -> StoreResult<Vec<ProposalRecord>> {
    if states.is_empty() {
        return Ok(Vec::new());
    }
    let sql = format!(
        "{} WHERE p.state IN ({}) ORDER BY p.updated_at, p.id",
        select_proposals!(""),
        sql::placeholders(states.len())
    );
    let mut query = sqlx::query(sqlx::AssertSqlSafe(sql));
    for s in states {
        query = query.bind(s.as_str());
    }
    rows::all(conn, query, rows::record).await
}

pub async fn insert_proposal(w: &mut WriteTx, metric_id: i64, author_id: i64) -> StoreResult<i64> {
    let now = w.now();
    Ok(sqlx::query_scalar(
        "INSERT INTO proposals (metric_id, state, author_id, created_at, updated_at) \
         VALUES ($1, 'draft', $2, $3, $3) RETURNING id",
    )
    .bind(metric_id)
    .bind(author_id)
    .bind(now)
    .fetch_one(w.conn())
    .await?)
}

/// Marks a proposal as changed now.
async fn touch(w: &mut WriteTx, proposal_id: i64) -> StoreResult<()> {
    let now = w.now();
    set_column(w, proposal_id, "updated_at", now).await
}

/// Sets one column of a proposal; `column` is a name written in this file, never input.
async fn set_column<'v, T>(
    w: &mut WriteTx,
    proposal_id: i64,
    column: &'static str,
    value: T,
) -> StoreResult<()>
where
    T: Encode<'v, Any> + Type<Any> + Send,
{
    let sql = format!("UPDATE proposals SET {column} = $1 WHERE id = $2");
    sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(value)
        .bind(proposal_id)
        .execute(w.conn())
        .await?;
    Ok(())
}

/// Moves a proposal to `state`. Closing states record when and why.
pub async fn set_state(
    w: &mut WriteTx,
    proposal_id: i64,
    state: ProposalState,
    close_reason: &str,
) -> StoreResult<()> {
    let now = w.now();
    let closed = (!state.is_open()).then_some(now);
    sqlx::query(
        "UPDATE proposals SET state = $1, updated_at = $2, closed_at = $3, close_reason = $4 WHERE id = $5",
    )
    .bind(state.as_str())
    .bind(now)
    .bind(closed)
    .bind(close_reason)
    .bind(proposal_id)
    .execute(w.conn())
    .await?;
    Ok(())
}

pub async fn mark_sent_back(w: &mut WriteTx, proposal_id: i64, revision: i64) -> StoreResult<()> {
    set_state(w, proposal_id, ProposalState::SentBack, "").await?;
    set_column(w, proposal_id, "sent_back_revision", revision).await
}

pub async fn mark_approved(w: &mut WriteTx, proposal_id: i64, version: i64) -> StoreResult<()> {
    set_state(w, proposal_id, ProposalState::Approved, "").await?;
    set_column(w, proposal_id, "version_number", version).await
}

//! What is said about a proposal, only ever inserted: revisions, reviews, sign-offs and
//! comments. Each insert also marks the proposal as touched.

use sqlx::Any;
use sqlx::any::AnyArguments;
use sqlx::query::QueryScalar;

use super::touch;
use crate::domain::proposal::{ThresholdContent, Verdict};
use crate::store::{StoreResult, WriteTx, rows};

/// Runs `insert`, an INSERT ... RETURNING id of a row said about proposal `proposal_id`, marks
/// the proposal touched, and returns the new row's id.
async fn insert_touching(
    w: &mut WriteTx,
    proposal_id: i64,
    insert: QueryScalar<'_, Any, i64, AnyArguments>,
) -> StoreResult<i64> {
    let id = insert.fetch_one(w.conn()).await?;
    touch(w, proposal_id).await?;
    Ok(id)
}

/// A revision as it is written.
pub struct NewRevision<'a> {
    pub proposal_id: i64,
    pub number: i64,
    pub content: &'a ThresholdContent,
    pub canonical_text: &'a str,
    pub content_hash: &'a str,
    pub diff_from_previous: &'a str,
    pub base_version: Option<i64>,
    pub diff_from_base: &'a str,
    pub note: &'a str,
    pub author_id: i64,
}

pub async fn insert_revision(w: &mut WriteTx, r: &NewRevision<'_>) -> StoreResult<()> {
    let now = w.now();
    let query = sqlx::query(
        "INSERT INTO revisions (proposal_id, number, direction, cut_1, cut_2, cut_3, cut_4, shades, \
         unit, effective_from, rationale, canonical_text, content_hash, diff_from_previous, \
         base_version, diff_from_base, note, author_id, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19)",
    )
    .bind(r.proposal_id)
    .bind(r.number);
    rows::bind_cuts(query, &r.content.cuts, r.content.shades)
        .bind(&r.content.unit)
        .bind(r.content.effective_from)
        .bind(&r.content.rationale)
        .bind(r.canonical_text)
        .bind(r.content_hash)
        .bind(r.diff_from_previous)
        .bind(r.base_version)
        .bind(r.diff_from_base)
        .bind(r.note)
        .bind(r.author_id)
        .bind(now)
        .execute(w.conn())
        .await?;
    touch(w, r.proposal_id).await
}

pub async fn insert_review(
    w: &mut WriteTx,
    proposal_id: i64,
    revision_number: i64,
    revision_hash: &str,
    reviewer_id: i64,
    verdict: Verdict,
    comment: &str,
) -> StoreResult<i64> {
    let now = w.now();
    let insert = sqlx::query_scalar(
        "INSERT INTO reviews (proposal_id, revision_number, revision_hash, reviewer_id, verdict, comment, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id",
    )
    .bind(proposal_id)
    .bind(revision_number)
    .bind(revision_hash)
    .bind(reviewer_id)
    .bind(verdict.as_str())
    .bind(comment)
    .bind(now);
    insert_touching(w, proposal_id, insert).await
}

pub async fn insert_signoff(
    w: &mut WriteTx,
    proposal_id: i64,
    revision_number: i64,
    revision_hash: &str,
    signer_id: i64,
    signer_name: &str,
    meaning: &str,
) -> StoreResult<i64> {
    let now = w.now();
    let insert = sqlx::query_scalar(
        "INSERT INTO signoffs (proposal_id, revision_number, revision_hash, signer_id, signer_name, meaning, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id",
    )
    .bind(proposal_id)
    .bind(revision_number)
    .bind(revision_hash)
    .bind(signer_id)
    .bind(signer_name)
    .bind(meaning)
    .bind(now);
    insert_touching(w, proposal_id, insert).await
}

pub async fn insert_comment(
    w: &mut WriteTx,
    proposal_id: i64,
    revision_number: i64,
    author_id: i64,
    cut: Option<&str>,
    body: &str,
) -> StoreResult<i64> {
    let now = w.now();
    let insert = sqlx::query_scalar(
        "INSERT INTO comments (proposal_id, revision_number, author_id, cut, body, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6) RETURNING id",
    )
    .bind(proposal_id)
    .bind(revision_number)
    .bind(author_id)
    .bind(cut)
    .bind(body)
    .bind(now);
    insert_touching(w, proposal_id, insert).await
}

//! What is said about a proposal, only ever inserted: revisions, reviews, sign-offs and
//! comments. Each insert also marks the proposal as touched.

use super::touch;
use crate::domain::proposal::{ThresholdContent, Verdict};
use crate::store::{StoreResult, WriteTx};

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
    let [c1, c2, c3, c4] = r.content.cuts.values();
    let now = w.now();
    sqlx::query(
        "INSERT INTO revisions (proposal_id, number, direction, cut_1, cut_2, cut_3, cut_4, shades, \
         unit, effective_from, rationale, canonical_text, content_hash, diff_from_previous, \
         base_version, diff_from_base, note, author_id, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19)",
    )
    .bind(r.proposal_id)
    .bind(r.number)
    .bind(r.content.direction().as_str())
    .bind(c1)
    .bind(c2)
    .bind(c3)
    .bind(c4)
    .bind(i64::from(r.content.shades.get()))
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
    let id = sqlx::query_scalar(
        "INSERT INTO reviews (proposal_id, revision_number, revision_hash, reviewer_id, verdict, comment, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id",
    )
    .bind(proposal_id)
    .bind(revision_number)
    .bind(revision_hash)
    .bind(reviewer_id)
    .bind(verdict.as_str())
    .bind(comment)
    .bind(now)
    .fetch_one(w.conn())
    .await?;
    touch(w, proposal_id).await?;
    Ok(id)
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
    let id = sqlx::query_scalar(
        "INSERT INTO signoffs (proposal_id, revision_number, revision_hash, signer_id, signer_name, meaning, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id",
    )
    .bind(proposal_id)
    .bind(revision_number)
    .bind(revision_hash)
    .bind(signer_id)
    .bind(signer_name)
    .bind(meaning)
    .bind(now)
    .fetch_one(w.conn())
    .await?;
    touch(w, proposal_id).await?;
    Ok(id)
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
    let id = sqlx::query_scalar(
        "INSERT INTO comments (proposal_id, revision_number, author_id, cut, body, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6) RETURNING id",
    )
    .bind(proposal_id)
    .bind(revision_number)
    .bind(author_id)
    .bind(cut)
    .bind(body)
    .bind(now)
    .fetch_one(w.conn())
    .await?;
    touch(w, proposal_id).await?;
    Ok(id)
}

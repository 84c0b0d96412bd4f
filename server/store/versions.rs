//! Approved threshold versions of each metric. A version is in force over
//! [effective_from, next version's effective_from); its status is derived from times, so no
//! job has to run when a scheduled version takes effect.

use serde::Serialize;
use sqlx::{FromRow, Row};

use super::Db;

use super::rows::{self, ContentColumns, CutColumns};
use super::{StoreResult, WriteTx};
use crate::domain::Timestamp;
use crate::domain::proposal::ThresholdContent;

/// A version's place in time, seen from one instant.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum VersionStatus {
    /// Approved, effective time still ahead.
    Scheduled,
    InForce,
    /// A later version took effect.
    Superseded,
}

impl VersionStatus {
    pub fn as_str(self) -> &'static str {
        match self {
            VersionStatus::Scheduled => "scheduled",
            VersionStatus::InForce => "in_force",
            VersionStatus::Superseded => "superseded",
        }
    }
}

#[derive(Clone, Debug, FromRow)]
pub struct VersionRecord {
    pub id: i64,
    pub metric_id: i64,
    pub number: i64,
    pub proposal_id: i64,
    pub revision_number: i64,
    pub revision_hash: String,
    #[sqlx(flatten, try_from = "ContentColumns")]
    pub content: ThresholdContent,
    pub effective_from: Timestamp,
    pub approved_at: Timestamp,
    pub canonical_text: String,
    #[sqlx(try_from = "ApproverList")]
    pub approvers: Vec<String>,
    pub signatory: Option<String>,
    /// The metric's name when the version was approved (the published set shows it).
    pub metric_name: String,
    /// The `version.approved` event that recorded it.
    pub approval_seq: i64,
}

/// The approvers' usernames as stored: a JSON list.
#[derive(sqlx::Type)]
#[sqlx(transparent)]
pub struct ApproverList(String);

impl From<ApproverList> for Vec<String> {
    fn from(list: ApproverList) -> Vec<String> {
        serde_json::from_str(&list.0).unwrap_or_default()
    }
}

impl VersionRecord {
    /// When the published set first showed this version: approval and effect both needed.
    pub fn published_at(&self) -> Timestamp {
        self.approved_at.max(self.effective_from)
    }

    /// Approved after the time it took effect: a recorded retroactive change.
    pub fn is_retroactive(&self) -> bool {
        self.effective_from < self.approved_at
    }
}

macro_rules! select_versions {
    ($rest:literal) => {
        concat!(
            "SELECT id, metric_id, number, proposal_id, revision_number, revision_hash, direction, ",
            "cut_1, cut_2, cut_3, cut_4, shades, unit, effective_from, approved_at, rationale, ",
            "canonical_text, approvers, signatory, metric_name, approval_seq FROM versions ",
            $rest
        )
    };
}

/// Every version of a metric, oldest first.
pub async fn list(conn: &mut Db, metric_id: i64) -> StoreResult<Vec<VersionRecord>> {
    let query =
        sqlx::query(select_versions!("WHERE metric_id = $1 ORDER BY number")).bind(metric_id);
    rows::all(conn, query, rows::record).await
}

/// The latest approved version (scheduled ones included): the one a new version follows in
/// valid time, since effective times never run backwards.
pub async fn latest(conn: &mut Db, metric_id: i64) -> StoreResult<Option<VersionRecord>> {
    let query = sqlx::query(select_versions!(
        "WHERE metric_id = $1 ORDER BY number DESC LIMIT 1"
    ))
    .bind(metric_id);
    rows::optional(conn, query, rows::record).await
}

/// The version in force at `as_of` as the register knew it at `known_at`: the latest one
/// approved by `known_at` whose effective time is not after `as_of`.
pub async fn in_force(
    conn: &mut Db,
    metric_id: i64,
    as_of: Timestamp,
    known_at: Timestamp,
) -> StoreResult<Option<VersionRecord>> {
    let query = sqlx::query(select_versions!(
        "WHERE metric_id = $1 AND effective_from <= $2 AND approved_at <= $3 ORDER BY number DESC LIMIT 1"
    ))
    .bind(metric_id)
    .bind(as_of)
    .bind(known_at);
    rows::optional(conn, query, rows::record).await
}

/// Each version's status at `now`, given all of a metric's versions in order.
pub fn statuses(versions: &[VersionRecord], now: Timestamp) -> Vec<VersionStatus> {
    let in_force = versions
        .iter()
        .filter(|v| v.effective_from <= now)
        .map(|v| v.number)
        .max();
    versions
        .iter()
        .map(|v| match in_force {
            _ if v.effective_from > now => VersionStatus::Scheduled,
            Some(n) if v.number == n => VersionStatus::InForce,
            _ => VersionStatus::Superseded,
        })
        .collect()
}

/// What a new version is made of.
pub struct NewVersion<'a> {
    pub metric_id: i64,
    /// From [`next_number`].
    pub number: i64,
    pub proposal_id: i64,
    pub revision_number: i64,
    pub revision_hash: &'a str,
    pub content: &'a ThresholdContent,
    pub effective_from: Timestamp,
    pub canonical_text: &'a str,
    pub approvers: &'a [String],
    pub signatory: Option<&'a str>,
    pub metric_name: &'a str,
    /// The `version.approved` event recorded for it.
    pub approval_seq: i64,
}

/// The number the metric's next version gets.
pub async fn next_number(w: &mut WriteTx, metric_id: i64) -> StoreResult<i64> {
    Ok(sqlx::query_scalar(
        "SELECT CAST(COALESCE(MAX(number), 0) + 1 AS BIGINT) FROM versions WHERE metric_id = $1",
    )
    .bind(metric_id)
    .fetch_one(w.conn())
    .await?)
}

/// Records a version (never changed afterwards: the database refuses it).
pub async fn insert(w: &mut WriteTx, v: &NewVersion<'_>) -> StoreResult<()> {
    let approved_at = w.now();
    let query = sqlx::query(
        "INSERT INTO versions (metric_id, number, proposal_id, revision_number, revision_hash, \
         direction, cut_1, cut_2, cut_3, cut_4, shades, unit, effective_from, approved_at, \
         rationale, canonical_text, approvers, signatory, metric_name, approval_seq) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18, $19, $20)",
    )
    .bind(v.metric_id)
    .bind(v.number)
    .bind(v.proposal_id)
    .bind(v.revision_number)
    .bind(v.revision_hash);
    rows::bind_cuts(query, &v.content.cuts, v.content.shades)
        .bind(&v.content.unit)
        .bind(v.effective_from)
        .bind(approved_at)
        .bind(&v.content.rationale)
        .bind(v.canonical_text)
        .bind(serde_json::to_string(v.approvers).expect("names serialise"))
        .bind(v.signatory)
        .bind(v.metric_name)
        .bind(v.approval_seq)
        .execute(w.conn())
        .await?;
    Ok(())
}

/// `set_revision` at `at`: how many versions, across the register, had been both approved and
/// effective by then. It changes exactly when the published set's content changes.
pub async fn set_revision(conn: &mut Db, at: Timestamp) -> StoreResult<i64> {
    Ok(set_state(conn, at, at).await?.0)
}

/// The published set's revision at `as_of` as recorded by `known_at`, and when that revision
/// took effect: the versions approved by both times and effective by `as_of`.
pub async fn set_state(
    conn: &mut Db,
    as_of: Timestamp,
    known_at: Timestamp,
) -> StoreResult<(i64, Option<Timestamp>)> {
    let row = sqlx::query(
        "SELECT COUNT(*) AS n, \
         MAX(CASE WHEN approved_at > effective_from THEN approved_at ELSE effective_from END) AS since \
         FROM versions WHERE approved_at <= $1 AND approved_at <= $2 AND effective_from <= $1",
    )
    .bind(as_of)
    .bind(known_at)
    .fetch_one(&mut *conn)
    .await?;
    Ok((row.try_get("n")?, row.try_get("since")?))
}

/// The next time the current set changes without a new approval: a scheduled version's
/// effective time.
pub async fn next_scheduled(conn: &mut Db, now: Timestamp) -> StoreResult<Option<Timestamp>> {
    Ok(sqlx::query_scalar(
        "SELECT MIN(effective_from) FROM versions WHERE effective_from > $1 AND approved_at <= $1",
    )
    .bind(now)
    .fetch_one(&mut *conn)
    .await?)
}

/// Every metric's version in force at `as_of` as recorded by `known_at`, with the metric's
/// key, in key order.
pub async fn in_force_all(
    conn: &mut Db,
    as_of: Timestamp,
    known_at: Timestamp,
) -> StoreResult<Vec<(String, VersionRecord)>> {
    let query = sqlx::query(concat!(
        "SELECT m.key AS metric_key, v.id, v.metric_id, v.number, v.proposal_id, v.revision_number, ",
        "v.revision_hash, v.direction, v.cut_1, v.cut_2, v.cut_3, v.cut_4, v.shades, v.unit, ",
        "v.effective_from, v.approved_at, v.rationale, v.canonical_text, v.approvers, v.signatory, ",
        "v.metric_name, v.approval_seq FROM versions v JOIN metrics m ON m.id = v.metric_id ",
        "WHERE v.effective_from <= $1 AND v.approved_at <= $2 AND v.number = (",
        "SELECT MAX(w.number) FROM versions w WHERE w.metric_id = v.metric_id ",
        "AND w.effective_from <= $1 AND w.approved_at <= $2) ORDER BY m.key"
    ))
    .bind(as_of)
    .bind(known_at);
    rows::all(conn, query, |r| {
        Ok((r.try_get("metric_key")?, rows::record(r)?))
    })
    .await
}

/// A metric's id and creation time, by key.
pub async fn metric_by_key(conn: &mut Db, key: &str) -> StoreResult<Option<(i64, Timestamp)>> {
    Ok(
        sqlx::query_as("SELECT id, created_at FROM metrics WHERE key = $1")
            .bind(key)
            .fetch_optional(&mut *conn)
            .await?,
    )
}

/// Keys of metrics added to the register by `at`.
pub async fn metrics_existing_at(conn: &mut Db, at: Timestamp) -> StoreResult<Vec<String>> {
    Ok(
        sqlx::query_scalar("SELECT key FROM metrics WHERE created_at <= $1 ORDER BY key")
            .bind(at)
            .fetch_all(&mut *conn)
            .await?,
    )
}

/// A version approved without a sign-off, with the cut points of the version before it.
#[derive(Clone, Debug)]
pub struct Unsigned {
    pub metric_key: String,
    pub number: i64,
    pub approved_at: Timestamp,
    pub cuts: crate::domain::CutSet,
    pub previous: Option<crate::domain::CutSet>,
}

/// Every version approved without a sign-off, by metric key and number (found through
/// `versions_unsigned`; no texts are read).
pub async fn unsigned(conn: &mut Db) -> StoreResult<Vec<Unsigned>> {
    let rows = sqlx::query(
        "SELECT v.metric_id, m.key AS metric_key, v.number, v.approved_at, v.direction, \
         v.cut_1, v.cut_2, v.cut_3, v.cut_4, v.shades \
         FROM versions v JOIN metrics m ON m.id = v.metric_id \
         WHERE v.signatory IS NULL ORDER BY m.key, v.number",
    )
    .fetch_all(&mut *conn)
    .await?;
    // The versions just before them, by (metric, number).
    let before = sqlx::query(
        "SELECT p.metric_id, p.number, p.direction, p.cut_1, p.cut_2, p.cut_3, p.cut_4, \
         p.shades FROM versions p WHERE EXISTS (SELECT 1 FROM versions v \
         WHERE v.signatory IS NULL AND v.metric_id = p.metric_id AND v.number = p.number + 1)",
    )
    .fetch_all(&mut *conn)
    .await?;
    let mut previous = std::collections::HashMap::with_capacity(before.len());
    for row in &before {
        let key: (i64, i64) = (row.try_get("metric_id")?, row.try_get("number")?);
        previous.insert(key, CutColumns::read(row)?);
    }
    rows.iter()
        .map(|row| {
            let (metric_id, number): (i64, i64) =
                (row.try_get("metric_id")?, row.try_get("number")?);
            Ok(Unsigned {
                metric_key: row.try_get("metric_key")?,
                number,
                approved_at: row.try_get("approved_at")?,
                cuts: CutColumns::read(row)?,
                previous: previous.remove(&(metric_id, number - 1)),
            })
        })
        .collect()
}

/// A metric with a review cadence, and when its last version was approved.
#[derive(Clone, Debug)]
pub struct Cadence {
    pub metric_key: String,
    pub months: i64,
    pub created_at: Timestamp,
    pub last_approved: Option<Timestamp>,
}

/// Every metric with a review cadence, by key.
pub async fn cadences(conn: &mut Db) -> StoreResult<Vec<Cadence>> {
    let rows = sqlx::query(
        "SELECT m.key, m.review_cadence_months, m.created_at, \
         (SELECT v.approved_at FROM versions v WHERE v.metric_id = m.id \
          ORDER BY v.number DESC LIMIT 1) AS last_approved \
         FROM metrics m WHERE m.review_cadence_months IS NOT NULL ORDER BY m.key",
    )
    .fetch_all(&mut *conn)
    .await?;
    rows.iter()
        .map(|row| {
            Ok(Cadence {
                metric_key: row.try_get("key")?,
                months: row.try_get("review_cadence_months")?,
                created_at: row.try_get("created_at")?,
                last_approved: row.try_get("last_approved")?,
            })
        })
        .collect()
}

//! Proposals and everything said about them: revisions, reviews, sign-offs and comments.
//! Revisions, reviews, sign-offs and comments are only ever inserted; whether a review or
//! sign-off is stale is derived (it names a revision that is no longer the latest).

use sqlx::Row;
use sqlx::any::AnyRow;

use super::Db;

use super::versions::cuts_from_row;
use super::{StoreError, StoreResult, WriteTx};
use crate::domain::proposal::{ProposalState, ThresholdContent, Verdict};
use crate::domain::{Person, Roles, Timestamp, Username};

fn person(row: &AnyRow, prefix: &str) -> StoreResult<Person> {
    let col = |name: &str| format!("{prefix}_{name}");
    let roles: String = row.try_get(col("roles").as_str())?;
    let active: i64 = row.try_get(col("active").as_str())?;
    Ok(Person {
        id: row.try_get(col("id").as_str())?,
        username: row.try_get(col("username").as_str())?,
        display_name: row.try_get(col("display_name").as_str())?,
        active: active != 0,
        roles: Roles::parse_list(&roles).unwrap_or_default(),
    })
}

/// Columns of a joined `users` row under `p_*` names.
macro_rules! person_columns {
    ($alias:literal, $p:literal) => {
        concat!(
            $alias,
            ".id AS ",
            $p,
            "_id, ",
            $alias,
            ".username AS ",
            $p,
            "_username, ",
            $alias,
            ".display_name AS ",
            $p,
            "_display_name, ",
            $alias,
            ".active AS ",
            $p,
            "_active, ",
            $alias,
            ".roles AS ",
            $p,
            "_roles"
        )
    };
}

#[derive(Clone, Debug)]
pub struct ProposalRecord {
    pub id: i64,
    pub metric_id: i64,
    pub metric_key: String,
    pub state: ProposalState,
    pub author: Person,
    pub created_at: Timestamp,
    pub updated_at: Timestamp,
    pub sent_back_revision: Option<i64>,
    pub closed_at: Option<Timestamp>,
    pub close_reason: String,
    pub version_number: Option<i64>,
}

#[derive(Clone, Debug)]
pub struct RevisionRecord {
    pub number: i64,
    pub content: ThresholdContent,
    pub canonical_text: String,
    pub content_hash: String,
    pub diff_from_previous: String,
    pub base_version: Option<i64>,
    pub diff_from_base: String,
    pub note: String,
    pub author: Person,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug)]
pub struct ReviewRecord {
    pub id: i64,
    pub revision_number: i64,
    pub revision_hash: String,
    pub reviewer: Person,
    pub verdict: Verdict,
    pub comment: String,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug)]
pub struct SignoffRecord {
    pub id: i64,
    pub revision_number: i64,
    pub revision_hash: String,
    pub signer: Person,
    /// The display name frozen at signing.
    pub signer_name: String,
    pub meaning: String,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug)]
pub struct CommentRecord {
    pub id: i64,
    pub revision_number: i64,
    pub author: Person,
    pub cut: Option<String>,
    pub body: String,
    pub created_at: Timestamp,
}

/// A proposal with everything recorded about it, in order.
#[derive(Clone, Debug)]
pub struct ProposalBundle {
    pub proposal: ProposalRecord,
    pub revisions: Vec<RevisionRecord>,
    pub reviews: Vec<ReviewRecord>,
    pub signoffs: Vec<SignoffRecord>,
    pub comments: Vec<CommentRecord>,
}

impl ProposalBundle {
    pub fn latest(&self) -> &RevisionRecord {
        self.revisions
            .last()
            .expect("a proposal has at least one revision")
    }

    /// Wrote at least one revision.
    pub fn is_author(&self, username: &Username) -> bool {
        self.revisions
            .iter()
            .any(|r| &r.author.username == username)
    }
}

fn state_of(text: &str) -> StoreResult<ProposalState> {
    ProposalState::parse(text).ok_or_else(|| StoreError::Config(format!("stored state {text:?}")))
}

fn proposal_from_row(row: &AnyRow) -> StoreResult<ProposalRecord> {
    let state: String = row.try_get("state")?;
    Ok(ProposalRecord {
        id: row.try_get("id")?,
        metric_id: row.try_get("metric_id")?,
        metric_key: row.try_get("metric_key")?,
        state: state_of(&state)?,
        author: person(row, "a")?,
        created_at: row.try_get("created_at")?,
        updated_at: row.try_get("updated_at")?,
        sent_back_revision: row.try_get("sent_back_revision")?,
        closed_at: row.try_get("closed_at")?,
        close_reason: row.try_get("close_reason")?,
        version_number: row.try_get("version_number")?,
    })
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
    let row = sqlx::query(select_proposals!("WHERE p.id = $1"))
        .bind(id)
        .fetch_optional(&mut *conn)
        .await?;
    row.as_ref().map(proposal_from_row).transpose()
}

/// The metric's open proposal (draft, in review or sent back), if any.
pub async fn open_for_metric(conn: &mut Db, metric_id: i64) -> StoreResult<Option<ProposalRecord>> {
    let row = sqlx::query(select_proposals!(
        "WHERE p.metric_id = $1 AND p.state IN ('draft', 'in_review', 'sent_back')"
    ))
    .bind(metric_id)
    .fetch_optional(&mut *conn)
    .await?;
    row.as_ref().map(proposal_from_row).transpose()
}

/// Every proposal of a metric, newest first.
pub async fn for_metric(conn: &mut Db, metric_id: i64) -> StoreResult<Vec<ProposalRecord>> {
    let rows = sqlx::query(select_proposals!(
        "WHERE p.metric_id = $1 ORDER BY p.id DESC"
    ))
    .bind(metric_id)
    .fetch_all(&mut *conn)
    .await?;
    rows.iter().map(proposal_from_row).collect()
}

/// Proposals in the given states, least recently touched first (the inboxes filter further).
pub async fn in_states(
    conn: &mut Db,
    states: &[ProposalState],
) -> StoreResult<Vec<ProposalRecord>> {
    if states.is_empty() {
        return Ok(Vec::new());
    }
    // Only numbered placeholders are spliced in; the states travel as bound parameters.
    let placeholders = (1..=states.len())
        .map(|i| format!("${i}"))
        .collect::<Vec<_>>()
        .join(", ");
    let sql = format!(
        "{} WHERE p.state IN ({placeholders}) ORDER BY p.updated_at, p.id",
        select_proposals!("")
    );
    let mut query = sqlx::query(sqlx::AssertSqlSafe(sql));
    for s in states {
        query = query.bind(s.as_str());
    }
    let rows = query.fetch_all(&mut *conn).await?;
    rows.iter().map(proposal_from_row).collect()
}

fn revision_from_row(row: &AnyRow) -> StoreResult<RevisionRecord> {
    let (cuts, shades) = cuts_from_row(row)?;
    Ok(RevisionRecord {
        number: row.try_get("number")?,
        content: ThresholdContent {
            cuts,
            shades,
            unit: row.try_get("unit")?,
            effective_from: row.try_get("effective_from")?,
            rationale: row.try_get("rationale")?,
        },
        canonical_text: row.try_get("canonical_text")?,
        content_hash: row.try_get("content_hash")?,
        diff_from_previous: row.try_get("diff_from_previous")?,
        base_version: row.try_get("base_version")?,
        diff_from_base: row.try_get("diff_from_base")?,
        note: row.try_get("note")?,
        author: person(row, "a")?,
        created_at: row.try_get("created_at")?,
    })
}

/// The proposal and all its records, or `None` when there is no such proposal.
pub async fn bundle(conn: &mut Db, id: i64) -> StoreResult<Option<ProposalBundle>> {
    let Some(proposal) = find(conn, id).await? else {
        return Ok(None);
    };
    let revisions = sqlx::query(concat!(
        "SELECT r.number, r.direction, r.cut_1, r.cut_2, r.cut_3, r.cut_4, r.shades, r.unit, ",
        "r.effective_from, r.rationale, r.canonical_text, r.content_hash, r.diff_from_previous, ",
        "r.base_version, r.diff_from_base, r.note, r.created_at, ",
        person_columns!("a", "a"),
        " FROM revisions r JOIN users a ON a.id = r.author_id WHERE r.proposal_id = $1 ORDER BY r.number"
    ))
    .bind(id)
    .fetch_all(&mut *conn)
    .await?
    .iter()
    .map(revision_from_row)
    .collect::<StoreResult<Vec<_>>>()?;
    let reviews = sqlx::query(concat!(
        "SELECT v.id, v.revision_number, v.revision_hash, v.verdict, v.comment, v.created_at, ",
        person_columns!("a", "a"),
        " FROM reviews v JOIN users a ON a.id = v.reviewer_id WHERE v.proposal_id = $1 ORDER BY v.id"
    ))
    .bind(id)
    .fetch_all(&mut *conn)
    .await?
    .iter()
    .map(|row| {
        let verdict: String = row.try_get("verdict")?;
        Ok(ReviewRecord {
            id: row.try_get("id")?,
            revision_number: row.try_get("revision_number")?,
            revision_hash: row.try_get("revision_hash")?,
            reviewer: person(row, "a")?,
            verdict: Verdict::parse(&verdict)
                .ok_or_else(|| StoreError::Config(format!("stored verdict {verdict:?}")))?,
            comment: row.try_get("comment")?,
            created_at: row.try_get("created_at")?,
        })
    })
    .collect::<StoreResult<Vec<_>>>()?;
    let signoffs = sqlx::query(concat!(
        "SELECT s.id, s.revision_number, s.revision_hash, s.signer_name, s.meaning, s.created_at, ",
        person_columns!("a", "a"),
        " FROM signoffs s JOIN users a ON a.id = s.signer_id WHERE s.proposal_id = $1 ORDER BY s.id"
    ))
    .bind(id)
    .fetch_all(&mut *conn)
    .await?
    .iter()
    .map(|row| {
        Ok(SignoffRecord {
            id: row.try_get("id")?,
            revision_number: row.try_get("revision_number")?,
            revision_hash: row.try_get("revision_hash")?,
            signer: person(row, "a")?,
            signer_name: row.try_get("signer_name")?,
            meaning: row.try_get("meaning")?,
            created_at: row.try_get("created_at")?,
        })
    })
    .collect::<StoreResult<Vec<_>>>()?;
    let comments = sqlx::query(concat!(
        "SELECT c.id, c.revision_number, c.cut, c.body, c.created_at, ",
        person_columns!("a", "a"),
        " FROM comments c JOIN users a ON a.id = c.author_id WHERE c.proposal_id = $1 ORDER BY c.id"
    ))
    .bind(id)
    .fetch_all(&mut *conn)
    .await?
    .iter()
    .map(|row| {
        Ok(CommentRecord {
            id: row.try_get("id")?,
            revision_number: row.try_get("revision_number")?,
            author: person(row, "a")?,
            cut: row.try_get("cut")?,
            body: row.try_get("body")?,
            created_at: row.try_get("created_at")?,
        })
    })
    .collect::<StoreResult<Vec<_>>>()?;
    Ok(Some(ProposalBundle {
        proposal,
        revisions,
        reviews,
        signoffs,
        comments,
    }))
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

async fn touch(w: &mut WriteTx, proposal_id: i64) -> StoreResult<()> {
    let now = w.now();
    sqlx::query("UPDATE proposals SET updated_at = $1 WHERE id = $2")
        .bind(now)
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
    sqlx::query("UPDATE proposals SET sent_back_revision = $1 WHERE id = $2")
        .bind(revision)
        .bind(proposal_id)
        .execute(w.conn())
        .await?;
    Ok(())
}

pub async fn mark_approved(w: &mut WriteTx, proposal_id: i64, version: i64) -> StoreResult<()> {
    set_state(w, proposal_id, ProposalState::Approved, "").await?;
    sqlx::query("UPDATE proposals SET version_number = $1 WHERE id = $2")
        .bind(version)
        .bind(proposal_id)
        .execute(w.conn())
        .await?;
    Ok(())
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

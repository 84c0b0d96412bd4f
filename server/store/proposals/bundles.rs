//! A proposal read whole: the proposal and its revisions, reviews, sign-offs and comments, each
//! in the order written.

use sqlx::FromRow;

use super::{ProposalRecord, find};
use crate::domain::proposal::{ThresholdContent, Verdict};
use crate::domain::{Person, Timestamp, Username};
use crate::store::rows::{self, ContentColumns, PersonColumns, person_columns};
use crate::store::{Db, StoreResult};

#[derive(Clone, Debug, FromRow)]
pub struct RevisionRecord {
    pub number: i64,
    #[sqlx(flatten, try_from = "ContentColumns")]
    pub content: ThresholdContent,
    pub canonical_text: String,
    pub content_hash: String,
    pub diff_from_previous: String,
    pub base_version: Option<i64>,
    pub diff_from_base: String,
    pub note: String,
    #[sqlx(flatten, try_from = "PersonColumns")]
    pub author: Person,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug, FromRow)]
pub struct ReviewRecord {
    pub id: i64,
    pub revision_number: i64,
    pub revision_hash: String,
    #[sqlx(flatten, try_from = "PersonColumns")]
    pub reviewer: Person,
    pub verdict: Verdict,
    pub comment: String,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug, FromRow)]
pub struct SignoffRecord {
    pub id: i64,
    pub revision_number: i64,
    pub revision_hash: String,
    #[sqlx(flatten, try_from = "PersonColumns")]
    pub signer: Person,
    /// The display name frozen at signing.
    pub signer_name: String,
    pub meaning: String,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug, FromRow)]
pub struct CommentRecord {
    pub id: i64,
    pub revision_number: i64,
    #[sqlx(flatten, try_from = "PersonColumns")]
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
    ));
    let reviews = sqlx::query(concat!(
        "SELECT v.id, v.revision_number, v.revision_hash, v.verdict, v.comment, v.created_at, ",
        person_columns!("a", "a"),
        " FROM reviews v JOIN users a ON a.id = v.reviewer_id WHERE v.proposal_id = $1 ORDER BY v.id"
    ));
    let signoffs = sqlx::query(concat!(
        "SELECT s.id, s.revision_number, s.revision_hash, s.signer_name, s.meaning, s.created_at, ",
        person_columns!("a", "a"),
        " FROM signoffs s JOIN users a ON a.id = s.signer_id WHERE s.proposal_id = $1 ORDER BY s.id"
    ));
    let comments = sqlx::query(concat!(
        "SELECT c.id, c.revision_number, c.cut, c.body, c.created_at, ",
        person_columns!("a", "a"),
        " FROM comments c JOIN users a ON a.id = c.author_id WHERE c.proposal_id = $1 ORDER BY c.id"
    ));
    Ok(Some(ProposalBundle {
        proposal,
        revisions: rows::all(conn, revisions.bind(id), rows::record).await?,
        reviews: rows::all(conn, reviews.bind(id), rows::record).await?,
        signoffs: rows::all(conn, signoffs.bind(id), rows::record).await?,
        comments: rows::all(conn, comments.bind(id), rows::record).await?,
    }))
}

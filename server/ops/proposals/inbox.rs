//! Each person's inbox: the open proposals waiting for them.

use serde::Serialize;

use super::approval::{decision, still_needed};
use crate::domain::User;
use crate::domain::proposal::ProposalState;
use crate::domain::{Role, Timestamp};
use crate::ops::OpResult;
use crate::store::metrics;
use crate::store::proposals::{self as records};
use crate::store::versions::{self};
use crate::store::{Store, policy};

/// A line in someone's inbox.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct InboxItem {
    /// The proposal's id.
    pub proposal: i64,
    /// The metric's key.
    pub metric: String,
    pub state: ProposalState,
    pub updated_at: Timestamp,
    /// What it waits for, in words.
    pub why: String,
}

/// Proposals waiting for this person: to review, to sign off, or (as owner) to act on.
#[derive(Clone, Debug, Default, Serialize, utoipa::ToSchema)]
pub struct Inbox {
    pub to_review: Vec<InboxItem>,
    pub to_sign: Vec<InboxItem>,
    /// Proposals the person wrote or whose metric they own.
    pub mine: Vec<InboxItem>,
}

pub async fn inbox(store: &Store, by: &User) -> OpResult<Inbox> {
    let mut conn = store.read().await?;
    let required = policy::reviewers_required(&mut conn).await?;
    let open = records::in_states(
        &mut conn,
        &[
            ProposalState::Draft,
            ProposalState::InReview,
            ProposalState::SentBack,
        ],
    )
    .await?;
    let mut inbox = Inbox::default();
    for p in open {
        let Some(bundle) = records::bundle(&mut conn, p.id).await? else {
            continue;
        };
        let metric = metrics::find(store, &p.metric_key).await?;
        let owns = metric.as_ref().is_some_and(|m| m.is_owner(&by.username));
        let previous = versions::latest(&mut conn, p.metric_id).await?;
        let needed = still_needed(&bundle, required, previous.as_ref());
        let item = |why: String| InboxItem {
            proposal: p.id,
            metric: p.metric_key.clone(),
            state: p.state,
            updated_at: p.updated_at,
            why,
        };
        let author = bundle.is_author(&by.username);
        let d = decision(&bundle, by, &bundle.latest().content_hash);
        if p.state == ProposalState::InReview {
            if by.roles.has(Role::Reviewer)
                && !author
                && !d.approved_latest
                && !d.signed_latest
                && needed.approvals > 0
            {
                inbox.to_review.push(item(needed.describe()));
            }
            if by.roles.has(Role::Signatory)
                && !author
                && !d.approved_latest
                && !d.signed_latest
                && needed.signoff
            {
                inbox.to_sign.push(item(needed.describe()));
            }
        }
        if owns || p.author.id == by.id {
            let why = match p.state {
                ProposalState::Draft => "draft: submit it for review when ready".to_string(),
                ProposalState::SentBack => "sent back: revise it and submit again".to_string(),
                _ => format!("in review: {}", needed.describe()),
            };
            inbox.mine.push(item(why));
        }
    }
    Ok(inbox)
}

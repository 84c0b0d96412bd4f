//! Proposal pages: the form ([`form`]), the proposal with its diff, change table, comments
//! and evidence ([`show`]), the decision forms ([`decide`]), and each person's inbox. Every
//! action posts a form and comes back to the proposal.

mod decide;
mod form;
mod show;

pub use decide::{comment, reject, review, signoff, submit, withdraw};
pub use form::{create, edit_form, new_form, revise};
pub use show::{show, signoff_page, strip_for};

use axum::extract::State;
use axum::response::Response;
use serde::Deserialize;

use super::{base_context, page};
use crate::domain::MetricKey;
use crate::ops::proposals as flow;
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

fn parse_key(key: &str) -> Result<MetricKey, PageError> {
    MetricKey::parse(key).map_err(|e| PageError(ApiError::not_found(e.to_string())))
}

fn parse_id(id: &str) -> Result<i64, PageError> {
    id.parse()
        .map_err(|_| PageError(ApiError::not_found(format!("no proposal with id {id:?}"))))
}

#[derive(Deserialize, Default)]
#[serde(default)]
pub struct DoneQuery {
    done: String,
    /// The evidence window.
    from: String,
    to: String,
}

fn done_message(done: &str) -> Option<&'static str> {
    Some(match done {
        "proposed" => "Your proposal was saved as a draft. Submit it for review when it is ready.",
        "revised" => "A new revision was saved. Earlier approvals and sign-offs no longer count.",
        "submitted" => "Submitted for review.",
        "commented" => "Your comment was added.",
        "approved" => "Your approval was recorded.",
        "sent_back" => "The proposal was sent back to its owners.",
        "signed" => "Your sign-off was recorded.",
        "withdrawn" => "The proposal was withdrawn.",
        "rejected" => "The proposal was rejected.",
        "in_force" => "Approved: the new version is recorded.",
        _ => return None,
    })
}

pub async fn inbox(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    let inbox = flow::inbox(&state.store, &session.user).await?;
    let mut ctx = base_context(Some(&session), "Inbox", "inbox");
    ctx.insert("inbox", &inbox);
    Ok(page("inbox.html", &ctx))
}

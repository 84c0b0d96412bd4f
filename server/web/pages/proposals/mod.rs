//! Proposal pages: the form ([`form`]), the proposal with its diff, change table, comments
//! and evidence ([`show`]), the decision forms ([`decide`]), and each person's inbox. Every
//! action posts a form and comes back to the proposal.

mod decide;
mod form;
mod show;

pub use decide::{comment, reject, review, signoff, submit, withdraw};
pub use form::{ProposalForm, ProposalFormValues, Revising, create, edit_form, new_form, revise};
pub use show::{ProposalPage, SignoffPage, show, signoff_page, strip_for};

use axum::extract::{FromRequest, Request, State};
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};

use super::{Common, PageData, page, session_path_and};
use crate::domain::access::Session;
use crate::ops::proposals::{self as flow, Inbox};
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

fn parse_id(id: &str) -> Result<i64, PageError> {
    id.parse()
        .map_err(|_| PageError(ApiError::not_found(format!("no proposal with id {id:?}"))))
}

/// What every page of one proposal starts from: the application, the reader's session, the
/// proposal's id from the path, and what the page reads besides (`input`: its query or its
/// posted form). Read in that order, as separate extractors would be; an id that is not a
/// number answers "no proposal" once the rest has been read.
pub struct OnProposal<Input> {
    pub state: AppState,
    pub session: Session,
    pub id: i64,
    pub input: Input,
}

impl<Input, M> FromRequest<AppState, M> for OnProposal<Input>
where
    Input: FromRequest<AppState, M>,
    Input::Rejection: IntoResponse,
{
    type Rejection = Response;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Self::Rejection> {
        let (session, id, input) = session_path_and(req, state).await?;
        let id = parse_id(&id).map_err(IntoResponse::into_response)?;
        Ok(OnProposal {
            state: state.clone(),
            session,
            id,
            input,
        })
    }
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

/// What waits for the reader: to review, to sign off, and their metrics' proposals.
#[derive(Debug, Serialize)]
pub struct InboxPage<'a> {
    pub inbox: &'a Inbox,
}

impl PageData for InboxPage<'_> {
    const TEMPLATE: &'static str = "inbox.html";
}

pub async fn inbox(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    let inbox = flow::inbox(&state.store, &session.user).await?;
    let common = Common::new(Some(&session), "Inbox", "inbox");
    Ok(page(&common, &InboxPage { inbox: &inbox }))
}

//! The decision forms: each posts one workflow step and comes back to the proposal, with a
//! message on success or the reason it was refused.

use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};

use super::OnProposal;
use super::show::{load_with_evidence, proposal_page};
use crate::domain::proposal::Verdict;
use crate::ops::OpError;
use crate::ops::proposals::{self as flow};
use crate::web::error::{ApiError, PageError};
use crate::web::pages::FormFields;

/// Runs a step; on success returns to the proposal with a message, on a refusal shows the
/// proposal again with the reason (and the status the API would give).
async fn step(
    on: &OnProposal<FormFields>,
    done: &str,
    result: Result<(), OpError>,
) -> Result<Response, PageError> {
    let (state, session, id) = (&on.state, &on.session, on.id);
    match result {
        Ok(()) => Ok(Redirect::to(&format!("/proposals/{id}?done={done}")).into_response()),
        Err(e) => {
            let api: ApiError = e.into();
            if api.status == StatusCode::INTERNAL_SERVER_ERROR
                || api.status == StatusCode::NOT_FOUND
            {
                return Err(PageError(api));
            }
            let (read, evidence) = load_with_evidence(state, &session.user, id, ("", "")).await?;
            let mut response = proposal_page(
                session,
                &read.metric,
                &read.view,
                read.previous.as_ref(),
                &evidence,
                None,
                Some(&api.message),
                api.status,
            );
            if let Some(secs) = api.retry_after {
                response
                    .headers_mut()
                    .insert(axum::http::header::RETRY_AFTER, secs.into());
            }
            Ok(response)
        }
    }
}

pub async fn submit(on: OnProposal<FormFields>) -> Result<Response, PageError> {
    let result = flow::submit(&on.state.store, &on.session.user, on.id).await;
    step(&on, "submitted", result).await
}

pub async fn comment(on: OnProposal<FormFields>) -> Result<Response, PageError> {
    let cut = Some(on.input.get("cut")).filter(|c| !c.is_empty());
    let result = flow::comment(
        &on.state.store,
        &on.session.user,
        on.id,
        on.input.get("body"),
        cut,
    )
    .await
    .map(|_| ());
    step(&on, "commented", result).await
}

pub async fn review(on: OnProposal<FormFields>) -> Result<Response, PageError> {
    let Some(verdict) = Verdict::parse(on.input.get("verdict")) else {
        return step(
            &on,
            "",
            Err(OpError::Conflict("choose approve or send back".into())),
        )
        .await;
    };
    let result = flow::review(
        &on.state.store,
        &on.session.user,
        on.id,
        verdict,
        on.input.get("revision_hash"),
        on.input.get("comment"),
    )
    .await;
    let done = match (&result, verdict) {
        (Ok(o), _) if o.version.is_some() => "in_force",
        (_, Verdict::Approve) => "approved",
        (_, Verdict::SendBack) => "sent_back",
    };
    step(&on, done, result.map(|_| ())).await
}

pub async fn signoff(on: OnProposal<FormFields>) -> Result<Response, PageError> {
    let result = flow::sign_off(
        &on.state.store,
        &on.session.user,
        on.id,
        on.input.get("revision_hash"),
        on.input.get("password"),
    )
    .await;
    let done = if result.as_ref().is_ok_and(|o| o.version.is_some()) {
        "in_force"
    } else {
        "signed"
    };
    step(&on, done, result.map(|_| ())).await
}

pub async fn withdraw(on: OnProposal<FormFields>) -> Result<Response, PageError> {
    let result = flow::withdraw(
        &on.state.store,
        &on.session.user,
        on.id,
        on.input.get("reason"),
    )
    .await;
    step(&on, "withdrawn", result).await
}

pub async fn reject(on: OnProposal<FormFields>) -> Result<Response, PageError> {
    let result = flow::reject(
        &on.state.store,
        &on.session.user,
        on.id,
        on.input.get("reason"),
    )
    .await;
    step(&on, "rejected", result).await
}

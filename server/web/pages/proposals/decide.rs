//! The decision forms: each posts one workflow step and comes back to the proposal, with a
//! message on success or the reason it was refused.

use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};

use super::parse_id;
use super::show::{load_with_evidence, proposal_page};
use crate::domain::access::Session;
use crate::domain::proposal::Verdict;
use crate::ops::OpError;
use crate::ops::proposals::{self as flow};
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};
use crate::web::pages::FormFields;

/// Runs a step; on success returns to the proposal with a message, on a refusal shows the
/// proposal again with the reason (and the status the API would give).
async fn step(
    state: &AppState,
    session: &Session,
    id: i64,
    done: &str,
    result: Result<(), OpError>,
) -> Result<Response, PageError> {
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
            let flow::ProposalRead {
                view,
                previous,
                metric,
            } = read;
            let mut response = proposal_page(
                session,
                &metric,
                &view,
                previous.as_ref(),
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

pub async fn submit(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    _form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::submit(&state.store, &session.user, id).await;
    step(&state, &session, id, "submitted", result).await
}

pub async fn comment(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let cut = Some(form.get("cut")).filter(|c| !c.is_empty());
    let result = flow::comment(&state.store, &session.user, id, form.get("body"), cut)
        .await
        .map(|_| ());
    step(&state, &session, id, "commented", result).await
}

pub async fn review(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let Some(verdict) = Verdict::parse(form.get("verdict")) else {
        return step(
            &state,
            &session,
            id,
            "",
            Err(OpError::Conflict("choose approve or send back".into())),
        )
        .await;
    };
    let result = flow::review(
        &state.store,
        &session.user,
        id,
        verdict,
        form.get("revision_hash"),
        form.get("comment"),
    )
    .await;
    let done = match (&result, verdict) {
        (Ok(o), _) if o.version.is_some() => "in_force",
        (_, Verdict::Approve) => "approved",
        (_, Verdict::SendBack) => "sent_back",
    };
    step(&state, &session, id, done, result.map(|_| ())).await
}

pub async fn signoff(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::sign_off(
        &state.store,
        &session.user,
        id,
        form.get("revision_hash"),
        form.get("password"),
    )
    .await;
    let done = if result.as_ref().is_ok_and(|o| o.version.is_some()) {
        "in_force"
    } else {
        "signed"
    };
    step(&state, &session, id, done, result.map(|_| ())).await
}

pub async fn withdraw(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::withdraw(&state.store, &session.user, id, form.get("reason")).await;
    step(&state, &session, id, "withdrawn", result).await
}

pub async fn reject(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::reject(&state.store, &session.user, id, form.get("reason")).await;
    step(&state, &session, id, "rejected", result).await
}

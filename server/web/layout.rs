//! What every page shares: the context its template starts from (who is signed in, the CSRF
//! token, the title and the current part of the navigation).

use serde_json::json;
use tera::Context;

use crate::domain::Role;
use crate::domain::access::Session;

/// The context every page starts from: who is signed in, their CSRF token, the page title
/// and which part of the navigation is current.
pub fn base_context(session: Option<&Session>, title: &str, section: &str) -> Context {
    let mut ctx = Context::new();
    ctx.insert("title", title);
    ctx.insert("section", section);
    match session {
        Some(s) => {
            ctx.insert(
                "me",
                &json!({
                    "username": s.user.username,
                    "display_name": s.user.display_name,
                    "roles": s.user.roles.iter().map(Role::as_str).collect::<Vec<_>>(),
                    "is_admin": s.user.roles.has(Role::Admin),
                    "is_auditor": s.user.roles.has(Role::Auditor) || s.user.roles.has(Role::Admin),
                }),
            );
            ctx.insert("csrf", &s.csrf_token);
        }
        None => {
            ctx.insert("me", &serde_json::Value::Null);
            ctx.insert("csrf", "");
        }
    }
    ctx
}

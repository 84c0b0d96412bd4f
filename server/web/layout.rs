//! What every page shares: the part of the context every template reads (who is signed in, the
//! CSRF token, the title and the current part of the navigation), and the one way a page's
//! data becomes its template's context.

use serde::Serialize;
use tera::Context;

use super::templates;
use crate::domain::access::Session;
use crate::domain::{Role, Username};

/// The data a template is rendered from: a struct whose fields are the names the template
/// reads, so a handler cannot leave one out, and whose template is named once, here. The
/// template check (tests/suite/page_templates.rs) renders each with a sample and compares the
/// names the template uses with the struct's fields.
pub trait PageData: Serialize {
    /// The template's name in `templates.rs`.
    const TEMPLATE: &'static str;
}

/// The person signed in, as the layout shows them.
#[derive(Debug, Serialize)]
pub struct Me<'a> {
    pub username: &'a Username,
    pub display_name: &'a str,
    pub roles: Vec<&'static str>,
    pub is_admin: bool,
    /// Admins see the audit pages too.
    pub is_auditor: bool,
}

/// What every page carries beside its own data.
#[derive(Debug, Serialize)]
pub struct Common<'a> {
    pub title: String,
    /// The part of the navigation marked current ("register", "audit"; empty for none).
    pub section: &'static str,
    /// Who is signed in; none on the sign-in and error pages.
    pub me: Option<Me<'a>>,
    /// The token forms post back as `_csrf`: the session's, or the sign-in form's own.
    pub csrf: &'a str,
}

impl<'a> Common<'a> {
    /// The common part for whoever `session` names (nobody when none), with a page title and
    /// the current part of the navigation.
    pub fn new(
        session: Option<&'a Session>,
        title: impl Into<String>,
        section: &'static str,
    ) -> Self {
        Common {
            title: title.into(),
            section,
            me: session.map(|s| Me {
                username: &s.user.username,
                display_name: &s.user.display_name,
                roles: s.user.roles.iter().map(Role::as_str).collect(),
                is_admin: s.user.roles.has(Role::Admin),
                is_auditor: s.user.roles.has(Role::Auditor) || s.user.roles.has(Role::Admin),
            }),
            csrf: session.map_or("", |s| s.csrf_token.as_str()),
        }
    }
}

/// The common part and a page's data side by side, as one map.
#[derive(Serialize)]
struct Page<'a, P> {
    #[serde(flatten)]
    common: &'a Common<'a>,
    #[serde(flatten)]
    data: &'a P,
}

/// The context a page's template is rendered with: the common part and the page's fields.
pub fn context<P: PageData>(common: &Common<'_>, data: &P) -> Result<Context, tera::Error> {
    Context::from_serialize(&Page { common, data })
}

/// Renders a page's template; a failure is a bug in a template or a page's data, and is logged.
pub fn render<P: PageData>(common: &Common<'_>, data: &P) -> Result<String, tera::Error> {
    let context = context(common, data).inspect_err(|e| {
        tracing::error!(template = P::TEMPLATE, error = %e, "page data did not make a context");
    })?;
    templates::render(P::TEMPLATE, &context)
}

//! Why did a threshold move: every version of a metric with who, when and why.

use serde::Serialize;

use super::require_auditor;
use crate::domain::User;
use crate::ops::OpResult;
use crate::store::Store;
use crate::store::metrics::{self};

/// One version in a metric's timeline, with the discussion that led to it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct TimelineEntry {
    #[serde(flatten)]
    pub version: crate::ops::versions::VersionView,
    pub reviews: Vec<crate::ops::proposals::ReviewView>,
    pub signoffs: Vec<crate::ops::proposals::SignoffView>,
    pub comments: Vec<crate::ops::proposals::CommentView>,
    /// How many revisions the proposal had.
    pub revisions: usize,
}

/// Why a metric's thresholds moved: every version, newest first, with who, when and why.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Timeline {
    /// The metric's key.
    pub metric: String,
    pub name: String,
    pub versions: Vec<TimelineEntry>,
}

pub async fn timeline(store: &Store, by: &User, key: &str) -> OpResult<Timeline> {
    require_auditor(by)?;
    let metric = metrics::get(store, key).await?;
    let history = crate::ops::versions::history(store, &metric).await?;
    let mut versions = Vec::new();
    for v in history.into_iter().rev() {
        let p = crate::ops::proposals::get(store, v.proposal_id, None)
            .await?
            .view;
        versions.push(TimelineEntry {
            reviews: p.reviews,
            signoffs: p.signoffs,
            comments: p.comments,
            revisions: p.revisions.len(),
            version: v,
        });
    }
    Ok(Timeline {
        metric: metric.key.to_string(),
        name: metric.name.clone(),
        versions,
    })
}

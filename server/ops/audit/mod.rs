//! The auditor's questions: why did a threshold move, what was in force at a time (and what the
//! register knew then), which exceptions deserve a look, and the event record itself.
//!
//! - [`timeline`]: why a metric's thresholds moved;
//! - [`as_of`]: what was in force at a time;
//! - [`exceptions`]: what deserves a look;
//! - [`record`]: extracts of the event record and its verification;
//! - [`full_check`]: the quick check from a checkpoint, and the full check in the background.

mod as_of;
mod exceptions;
mod full_check;
mod record;
mod timeline;

pub use crate::store::checkpoint::FullCheck;
pub use as_of::{AsOf, AsOfEntry, VersionBrief, as_of};
pub use exceptions::{
    EventException, Exceptions, ExceptionsCache, LapsedReview, UnsignedVersion, exceptions,
};
pub use full_check::{FullCheckStarted, FullCheckView, full_check, start_full_check};
pub use record::{
    DIFFERENCES_SHOWN, EXTRACT_LIMIT_MAX, Extract, ExtractSummary, Verification, extract, verify,
    verify_as_operator,
};
pub use timeline::{Timeline, TimelineEntry, timeline};

use super::OpResult;
use crate::domain::Metric;
use crate::domain::Role;
use crate::domain::User;
use crate::ops::OpError;
use crate::store::Store;
pub use crate::store::events::EventFilter;
use crate::store::metrics::{self, MetricFilter};

/// Auditors read everything; admins too.
pub fn require_auditor(user: &User) -> OpResult<()> {
    if user.roles.has(Role::Auditor) || user.roles.has(Role::Admin) {
        Ok(())
    } else {
        Err(OpError::Forbidden(
            "the audit views are for auditors (and admins)".into(),
        ))
    }
}

async fn conn(store: &Store) -> OpResult<crate::store::Db> {
    Ok(store.read().await?)
}

/// Every metric, in key order (the register is small enough to read whole).
async fn all_metrics(store: &Store) -> OpResult<Vec<Metric>> {
    let mut out = Vec::new();
    let mut page = 1;
    loop {
        let found =
            metrics::list(store, &MetricFilter::default(), page, metrics::PER_PAGE_MAX).await?;
        let n = found.metrics.len() as i64;
        out.extend(found.metrics);
        if n < found.per_page {
            return Ok(out);
        }
        page += 1;
    }
}

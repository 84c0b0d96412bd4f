//! What was in force at a valid time, as the register knew it at a transaction time.

use serde::Serialize;

use super::{all_metrics, conn, require_auditor};
use crate::domain::Timestamp;
use crate::domain::User;
use crate::ops::OpResult;
use crate::store::Store;
use crate::store::metrics::{self};
use crate::store::versions::{self, VersionRecord};

/// A version as the as-of view shows it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct VersionBrief {
    pub number: i64,
    #[schema(value_type = crate::domain::Direction)]
    pub direction: &'static str,
    /// The four cut points by name.
    pub cuts: std::collections::BTreeMap<&'static str, f64>,
    /// The cuts in their order, as words: "critical 50, intervene 70, ...".
    pub cuts_text: String,
    pub effective_from: Timestamp,
    pub approved_at: Timestamp,
    /// The approvers' display names.
    pub approvers: Vec<String>,
    /// The signatory's display name, if one signed.
    pub signatory: Option<String>,
}

fn brief(v: &VersionRecord) -> VersionBrief {
    VersionBrief {
        number: v.number,
        direction: v.content.direction().as_str(),
        cuts: crate::domain::proposal::cuts_object(&v.content.cuts),
        cuts_text: v
            .content
            .cuts
            .named()
            .iter()
            .map(|(name, value)| format!("{name} {}", crate::domain::number::format(*value)))
            .collect::<Vec<_>>()
            .join(", "),
        effective_from: v.effective_from,
        approved_at: v.approved_at,
        approvers: v.approvers.clone(),
        signatory: v.signatory.clone(),
    }
}

/// One metric in the as-of view.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct AsOfEntry {
    /// The metric's key.
    pub metric: String,
    pub name: String,
    /// In force at `as_of`, as the register had recorded it by `known_at`.
    pub in_force: Option<VersionBrief>,
    /// In force at `as_of` as the register knows it now, when that differs: a version
    /// approved after `known_at` took effect at or before `as_of` (a retroactive change).
    pub known_later: Option<VersionBrief>,
    /// The finding in words.
    pub note: String,
}

/// The versions in force at a valid time (`as_of`), as the register knew them at a
/// transaction time (`known_at`).
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct AsOf {
    pub as_of: Timestamp,
    pub known_at: Timestamp,
    pub metrics: Vec<AsOfEntry>,
}

pub async fn as_of(
    store: &Store,
    by: &User,
    as_of: Option<Timestamp>,
    known_at: Option<Timestamp>,
    key: Option<&str>,
) -> OpResult<AsOf> {
    require_auditor(by)?;
    let now = store.now();
    let (as_of, known_at) = (as_of.unwrap_or(now), known_at.unwrap_or(now));
    let metrics = match key {
        Some(k) => vec![metrics::get(store, k).await?],
        None => all_metrics(store).await?,
    };
    let mut c = conn(store).await?;
    let mut out = Vec::new();
    for m in metrics {
        let then = versions::in_force(&mut c, m.id, as_of, known_at).await?;
        let later = versions::in_force(&mut c, m.id, as_of, now.max(known_at)).await?;
        let differs = then.as_ref().map(|v| v.number) != later.as_ref().map(|v| v.number);
        let note = match (&then, &later) {
            (_, Some(l)) if differs => format!(
                "version {} was approved at {}, after {known_at}, with effect from {}: a retroactive change recorded later",
                l.number, l.approved_at, l.effective_from
            ),
            (Some(v), _) => format!("version {} in force since {}", v.number, v.effective_from),
            (None, _) => "no version was in force".to_string(),
        };
        out.push(AsOfEntry {
            metric: m.key.to_string(),
            name: m.name.clone(),
            in_force: then.as_ref().map(brief),
            known_later: if differs {
                later.as_ref().map(brief)
            } else {
                None
            },
            note,
        });
    }
    Ok(AsOf {
        as_of,
        known_at,
        metrics: out,
    })
}

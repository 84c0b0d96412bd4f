//! What a proposal proposes: direction and cuts, shades, unit, effective-from time and
//! rationale, validated.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::problems::Problems;
use super::text::{self, TextError};
use super::thresholds::{CutSet, Direction, Shades};
use super::time::Timestamp;

/// The content of one revision (and of the version it may become).
#[derive(Clone, Debug, PartialEq)]
pub struct ThresholdContent {
    pub cuts: CutSet,
    pub shades: Shades,
    pub unit: String,
    /// `None`: comes into force when approved.
    pub effective_from: Option<Timestamp>,
    pub rationale: String,
}

impl ThresholdContent {
    pub fn direction(&self) -> Direction {
        self.cuts.direction()
    }
}

/// A proposal or revision as submitted, before validation: the content fields, as
/// `POST /api/v1/metrics/{key}/proposals` takes them.
#[derive(Clone, Debug, Default, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ContentInput {
    /// higher_is_better, lower_is_better or target_band.
    pub direction: String,
    /// The four cut points by name: critical, intervene, outperform, stretch; for a band
    /// critical_low, intervene_low, intervene_high, critical_high.
    pub cuts: BTreeMap<String, f64>,
    /// Shades per graded zone, 2 to 5 (default 3).
    #[serde(default)]
    pub shades: Option<i64>,
    /// Defaults to the metric's unit.
    #[serde(default)]
    pub unit: Option<String>,
    /// RFC 3339 time or bare date; absent or null means "on approval".
    #[serde(default)]
    pub effective_from: Option<String>,
    pub rationale: String,
}

/// The rationale: required, non-empty, at most 20,000 characters.
pub fn rationale(value: &str) -> Result<String, TextError> {
    let r = text::multi_line("rationale", value, 1, text::RATIONALE_MAX)?;
    if r.trim().is_empty() {
        return Err(TextError::Empty { field: "rationale" });
    }
    Ok(r)
}

/// A revision hash as a request names it: the 64 lowercase hex characters of a SHA-256;
/// anything else cannot name a revision.
pub fn revision_hash<'a>(field: &str, text: &'a str) -> Result<&'a str, String> {
    let hex = |b: &u8| b.is_ascii_digit() || (b'a'..=b'f').contains(b);
    if text.len() == 64 && text.as_bytes().iter().all(hex) {
        Ok(text)
    } else {
        Err(format!(
            "{field} must be the 64 lowercase hex characters of a revision's hash"
        ))
    }
}

/// Validates everything at once, so a form can show every problem beside its field.
/// `default_unit` is the metric's unit, used when none is given.
pub fn validate_content(
    input: &ContentInput,
    default_unit: &str,
) -> Result<ThresholdContent, Problems> {
    let mut p = Problems::default();
    let direction: Option<Direction> = p.check("direction", text::trim(&input.direction).parse());
    let cuts = direction.and_then(|d| {
        p.check(
            "cuts",
            CutSet::from_named(d, input.cuts.iter().map(|(k, v)| (k.as_str(), *v))),
        )
    });
    let shades = p.check(
        "shades",
        input.shades.map_or(Ok(Shades::default()), Shades::new),
    );
    let unit = p.check(
        "unit",
        super::metric::unit(input.unit.as_deref().unwrap_or(default_unit)),
    );
    let effective_from = match input.effective_from.as_deref().map(str::trim) {
        None | Some("") => Some(None),
        Some(t) => p.check("effective_from", Timestamp::parse(t)).map(Some),
    };
    let rationale = p.check("rationale", rationale(&input.rationale));
    match (cuts, shades, unit, effective_from, rationale) {
        (Some(cuts), Some(shades), Some(unit), Some(effective_from), Some(rationale))
            if p.is_empty() =>
        {
            Ok(ThresholdContent {
                cuts,
                shades,
                unit,
                effective_from,
                rationale,
            })
        }
        _ => Err(p),
    }
}

/// A content's cuts as the API shows them: an object keyed by cut name.
pub fn cuts_object(cuts: &CutSet) -> BTreeMap<&'static str, f64> {
    cuts.named().into_iter().collect()
}

/// A proposal's state (docs/design.md).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum ProposalState {
    Draft,
    InReview,
    Approved,
    SentBack,
    Rejected,
    Withdrawn,
}

impl ProposalState {
    pub const ALL: [ProposalState; 6] = [
        ProposalState::Draft,
        ProposalState::InReview,
        ProposalState::Approved,
        ProposalState::SentBack,
        ProposalState::Rejected,
        ProposalState::Withdrawn,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            ProposalState::Draft => "draft",
            ProposalState::InReview => "in_review",
            ProposalState::Approved => "approved",
            ProposalState::SentBack => "sent_back",
            ProposalState::Rejected => "rejected",
            ProposalState::Withdrawn => "withdrawn",
        }
    }

    pub fn parse(text: &str) -> Option<ProposalState> {
        ProposalState::ALL.into_iter().find(|s| s.as_str() == text)
    }

    /// Open proposals block a second one for the same metric.
    pub fn is_open(self) -> bool {
        matches!(
            self,
            ProposalState::Draft | ProposalState::InReview | ProposalState::SentBack
        )
    }
}

/// A review's verdict.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    Approve,
    SendBack,
}

impl Verdict {
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Approve => "approve",
            Verdict::SendBack => "send_back",
        }
    }

    pub fn parse(text: &str) -> Option<Verdict> {
        match text {
            "approve" => Some(Verdict::Approve),
            "send_back" => Some(Verdict::SendBack),
            _ => None,
        }
    }
}

//! `audit verify`: the event record checked, with an exit code that says whether it verifies.

use std::process::ExitCode;

use super::AuditCommand;
use super::terminal::explain;

pub(super) async fn audit(cmd: AuditCommand) -> anyhow::Result<ExitCode> {
    let AuditCommand::Verify {
        known_head,
        db,
        full: _,
    } = cmd;
    let known = known_head
        .as_deref()
        .map(crate::audit::parse_known_head)
        .transpose()
        .map_err(|e| anyhow::anyhow!("--known-head {e}"))?;
    let store = db.open().await?;
    let v = crate::ops::audit::verify_as_operator(&store, known)
        .await
        .map_err(explain)?;
    if v.ok {
        println!("{}", v.line);
        return Ok(ExitCode::SUCCESS);
    }
    eprintln!("the event record does not verify: {}", v.line);
    for d in v.differences.iter().skip(1) {
        eprintln!("  {d}");
    }
    if v.difference_count > v.differences.len() {
        eprintln!(
            "  ... and {} more",
            v.difference_count - v.differences.len()
        );
    }
    Ok(ExitCode::from(1))
}

//! `observations import`: a metric's history from a CSV file, with a progress bar.

use anyhow::Context;

use super::ObservationsCommand;
use super::terminal::explain;

pub(super) async fn observations(cmd: ObservationsCommand) -> anyhow::Result<()> {
    use crate::domain::observations::Mode;
    use crate::ops::uploads::{self, Format, Uploader};
    use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
    use sha2::{Digest, Sha256};
    let ObservationsCommand::Import {
        metric,
        mode,
        quiet,
        file,
        db,
    } = cmd;
    let mode = if mode == "replace" {
        Mode::Replace
    } else {
        Mode::Merge
    };
    let store = db.open().await?;
    // The metric first, so a wrong key is said before a large file is read.
    crate::ops::metrics::get(&store, &metric)
        .await
        .map_err(explain)?;
    let bytes = std::fs::read(&file).with_context(|| format!("reading {}", file.display()))?;
    let bar = ProgressBar::new(bytes.len() as u64);
    if quiet {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    }
    bar.set_style(
        ProgressStyle::with_template("{msg:>8} [{bar:40}] {percent:>3}% {pos}/{len}")
            .expect("a valid template")
            .progress_chars("=> "),
    );
    bar.set_message("reading");
    let sha256 = hex::encode(Sha256::digest(&bytes));
    let parsed = {
        let bar = bar.clone();
        tokio::task::spawn_blocking(move || {
            uploads::parse(Format::Csv, &bytes, |read| bar.set_position(read))
        })
        .await?
    };
    let rows = match parsed {
        Ok(rows) => rows,
        Err(problems) => {
            bar.finish_and_clear();
            for p in &problems {
                eprintln!("{}: {}", file.display(), p.describe());
            }
            anyhow::bail!(
                "{} problem{} in {}; nothing was changed",
                problems.len(),
                if problems.len() == 1 { "" } else { "s" },
                file.display()
            );
        }
    };
    bar.set_message("writing");
    bar.set_length(rows.len() as u64);
    bar.set_position(0);
    let report = uploads::store_rows(&store, Uploader::Cli, &metric, mode, &rows, &sha256, |n| {
        bar.set_position(n)
    })
    .await
    .map_err(explain)?;
    bar.set_message("tidying");
    // The history this upload replaced goes now, not at some later start-up.
    crate::ops::upkeep::once(&store).await;
    bar.finish_and_clear();
    println!(
        "{}: {} rows ({} added, {} replaced, {} removed); {} periods stored; sha256 {}; event {}",
        report.metric,
        report.rows,
        report.added,
        report.replaced,
        report.removed,
        report.total,
        report.sha256,
        report.event_seq
    );
    Ok(())
}

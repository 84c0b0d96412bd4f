//! Talking with the person at the terminal: an operation's error as one line, a password
//! read from standard input.

use std::io::BufRead;

use anyhow::{Context, bail};

use crate::ops::OpError;

/// Turns an operation's error into one line for the terminal, listing every field problem.
pub(super) fn explain(e: OpError) -> anyhow::Error {
    match e {
        OpError::Invalid(p) => anyhow::anyhow!(
            "{}",
            p.0.iter()
                .map(|f| f.message.clone())
                .collect::<Vec<_>>()
                .join("; ")
        ),
        other => anyhow::anyhow!("{other}"),
    }
}

pub(super) fn read_password() -> anyhow::Result<String> {
    let mut line = String::new();
    std::io::stdin()
        .lock()
        .read_line(&mut line)
        .context("cannot read the password from standard input")?;
    let password = line.trim_end_matches(['\n', '\r']).to_string();
    if password.is_empty() {
        bail!(
            "no password on standard input: pipe it in, e.g. `printf '%s\\n' \"$PW\" | cutpoints user add ...`"
        );
    }
    Ok(password)
}

//! `cutpoints classify`: the engine on the command line.

use std::io::Write;
use std::process::ExitCode;

use clap::Args;

use crate::domain::thresholds::{Direction, Shades, parse_cut_list, parse_finite};
use crate::engine::classify;

#[derive(Args, Debug, Clone)]
pub struct ClassifyArgs {
    /// higher_is_better, lower_is_better or target_band.
    #[arg(long, env = "CUTPOINTS_DIRECTION")]
    pub direction: String,
    /// The four cut points, comma-separated, in the order of the direction's rule (for
    /// negative numbers write --cuts=-20,-10,0,5).
    #[arg(long, env = "CUTPOINTS_CUTS", allow_hyphen_values = true)]
    pub cuts: String,
    /// Shades per graded zone, 2 to 5.
    #[arg(
        long,
        env = "CUTPOINTS_SHADES",
        default_value_t = 3,
        allow_negative_numbers = true
    )]
    pub shades: i64,
    /// Values to classify; `null` is a missing value. Put `--` before negative values.
    #[arg(required = true, allow_negative_numbers = true)]
    pub values: Vec<String>,
}

fn bad_input(message: impl std::fmt::Display) -> ExitCode {
    eprintln!("error: {message}");
    ExitCode::from(2)
}

/// Checks everything before printing anything, so bad input prints no partial answer.
pub fn run(args: &ClassifyArgs) -> ExitCode {
    let direction: Direction = match args.direction.parse() {
        Ok(d) => d,
        Err(e) => return bad_input(e),
    };
    let cuts = match parse_cut_list(direction, &args.cuts) {
        Ok(c) => c,
        Err(e) => return bad_input(e),
    };
    let shades = match Shades::new(args.shades) {
        Ok(s) => s,
        Err(e) => return bad_input(e),
    };
    let mut values = Vec::with_capacity(args.values.len());
    for text in &args.values {
        if text.trim() == "null" {
            values.push(None);
            continue;
        }
        match parse_finite(text) {
            Ok(v) => values.push(Some(v)),
            Err(e) => return bad_input(e),
        }
    }
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    for result in classify::classify_all(&cuts, shades, &values) {
        let line = serde_json::to_string(&result).expect("classifications serialise");
        if writeln!(out, "{line}").is_err() {
            return ExitCode::FAILURE;
        }
    }
    ExitCode::SUCCESS
}

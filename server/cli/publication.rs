//! `export` and `keys`: the published set written out, and the keys that sign it.

use super::{ExportArgs, KeysCommand};
use crate::domain::Timestamp;

pub(super) async fn export(args: ExportArgs) -> anyhow::Result<()> {
    let time = |name: &str, text: &Option<String>| -> anyhow::Result<Option<Timestamp>> {
        text.as_deref()
            .map(|t| Timestamp::parse(t).map_err(|e| anyhow::anyhow!("--{name}: {e}")))
            .transpose()
    };
    let as_of = time("as-of", &args.as_of)?;
    let known_at = time("known-at", &args.known_at)?;
    let store = args.db.open().await?;
    let signer = crate::publish::signing::load_or_create(&store, &args.key.signing_key).await?;
    let publisher = crate::publish::Publisher::new(signer);
    let rendered = publisher.at(&store, as_of, known_at, None).await?;
    let bytes = if args.format == "csv" {
        &rendered.csv
    } else {
        &rendered.json
    };
    use std::io::Write;
    std::io::stdout().write_all(bytes)?;
    Ok(())
}

pub(super) async fn keys(cmd: KeysCommand) -> anyhow::Result<()> {
    match cmd {
        KeysCommand::Rotate { key, db } => {
            let store = db.open().await?;
            let signer = crate::publish::signing::rotate(&store, &key.signing_key).await?;
            println!(
                "new signing key {} written to {}; restart every instance with it",
                signer.key_id(),
                key.signing_key.display()
            );
        }
        KeysCommand::List { db } => {
            let store = db.open().await?;
            println!("key_id\tstatus\tcreated_at\tretired_at\tpublic_key");
            for k in crate::publish::signing::registry(&store).await? {
                println!(
                    "{}\t{}\t{}\t{}\t{}",
                    k.key_id,
                    k.status,
                    k.created_at,
                    k.retired_at.map(|t| t.to_string()).unwrap_or_default(),
                    k.public_key
                );
            }
        }
    }
    Ok(())
}

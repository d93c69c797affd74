//! `dispar keys create|list|revoke`: API keys, written to and read from the database
//! directly (the HTTP API has no key endpoints).

use clap::Subcommand;
use dispar_core::code::SiteCode;
use dispar_store::{ApiKey, KeyRole};

use super::{CliResult, DatabaseArgs, open};

/// `dispar keys ...`.
#[derive(Debug, Subcommand)]
pub enum KeysCommand {
    /// Create a key; prints the token alone on standard output (it is shown once).
    Create {
        /// What the key may do.
        #[arg(long, value_parser = parse_role)]
        role: KeyRole,
        /// A site an ingest key may write (repeat for several).
        #[arg(long = "site", value_name = "SITE")]
        sites: Vec<String>,
        /// A note for people (who uses the key).
        #[arg(long)]
        label: Option<String>,
        #[command(flatten)]
        database: DatabaseArgs,
    },
    /// List keys (never their secrets).
    List {
        #[command(flatten)]
        database: DatabaseArgs,
    },
    /// Revoke a key by id; requests with it are refused from then on.
    Revoke {
        /// The key's id (the number after `dsp_` in its token).
        id: i64,
        #[command(flatten)]
        database: DatabaseArgs,
    },
}

fn parse_role(s: &str) -> Result<KeyRole, String> {
    s.parse::<KeyRole>().map_err(|e| e.to_string())
}

/// Runs `dispar keys ...`.
pub async fn run(cmd: KeysCommand) -> CliResult {
    match cmd {
        KeysCommand::Create {
            role,
            sites,
            label,
            database,
        } => {
            let sites = sites
                .iter()
                .map(|s| SiteCode::parse(s).map_err(|e| format!("--site {s:?}: site code {e}")))
                .collect::<Result<Vec<_>, _>>()?;
            match (role, sites.is_empty()) {
                (KeyRole::Ingest, true) => {
                    return Err("an ingest key needs at least one --site".to_owned());
                }
                (KeyRole::Read | KeyRole::Admin, false) => {
                    return Err(format!(
                        "--site applies to ingest keys only; a {role} key covers every site"
                    ));
                }
                _ => {}
            }
            let secret =
                dispar::auth::new_secret().map_err(|e| format!("no randomness available: {e}"))?;
            let store = open(&database).await?;
            let id = store
                .create_key(role, &sites, label.as_deref(), &secret.hash)
                .await
                .map_err(|e| format!("cannot create the key: {e}"));
            store.close().await;
            let id = id?;
            println!("{}", dispar::auth::token(id, &secret.secret_hex));
            let sites_text = if sites.is_empty() {
                "all sites".to_owned()
            } else {
                sites
                    .iter()
                    .map(SiteCode::as_str)
                    .collect::<Vec<_>>()
                    .join(", ")
            };
            eprintln!(
                "created key {id}: role {role}, {sites_text}{}. The token above is shown only now; keep it secret.",
                label.map(|l| format!(", label {l:?}")).unwrap_or_default()
            );
            Ok(())
        }
        KeysCommand::List { database } => {
            let store = open(&database).await?;
            let keys = store
                .list_keys()
                .await
                .map_err(|e| format!("cannot list keys: {e}"));
            store.close().await;
            let keys = keys?;
            print!("{}", key_table(&keys));
            Ok(())
        }
        KeysCommand::Revoke { id, database } => {
            let store = open(&database).await?;
            let result = store.revoke_key(id).await;
            store.close().await;
            match result {
                Ok(()) => {
                    eprintln!("revoked key {id}");
                    Ok(())
                }
                Err(dispar_store::StoreError::NotFound { .. }) => {
                    Err(format!("there is no key {id}"))
                }
                Err(e) => Err(format!("cannot revoke key {id}: {e}")),
            }
        }
    }
}

/// The `keys list` table: a header and one line per key, each column as wide as its
/// widest cell, two spaces apart; ids right-aligned, the label last and unpadded.
fn key_table(keys: &[ApiKey]) -> String {
    let rows: Vec<[String; 6]> = keys
        .iter()
        .map(|k| {
            let sites = if k.sites.is_empty() {
                "*".to_owned()
            } else {
                k.sites
                    .iter()
                    .map(SiteCode::as_str)
                    .collect::<Vec<_>>()
                    .join(",")
            };
            let status = if k.is_revoked() { "revoked" } else { "active" };
            [
                k.id.to_string(),
                k.role.to_string(),
                status.to_owned(),
                k.created_at
                    .format(&time::format_description::well_known::Rfc3339)
                    .unwrap_or_default(),
                sites,
                k.label.clone().unwrap_or_default(),
            ]
        })
        .collect();
    let header = ["id", "role", "status", "created", "sites", "label"].map(str::to_owned);
    let mut widths = header.clone().map(|h| h.chars().count());
    for row in &rows {
        for (w, cell) in widths.iter_mut().zip(row) {
            *w = (*w).max(cell.chars().count());
        }
    }
    let mut out = String::new();
    for row in std::iter::once(&header).chain(&rows) {
        let [id, role, status, created, sites, label] = row;
        let line = format!(
            "{id:>w0$}  {role:<w1$}  {status:<w2$}  {created:<w3$}  {sites:<w4$}  {label}",
            w0 = widths[0],
            w1 = widths[1],
            w2 = widths[2],
            w3 = widths[3],
            w4 = widths[4],
        );
        out.push_str(line.trim_end());
        out.push('\n');
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn key(id: i64, role: KeyRole, sites: &[&str], label: Option<&str>, revoked: bool) -> ApiKey {
        let at = time::macros::datetime!(2026-04-20 10:11:12.123456 UTC);
        ApiKey {
            id,
            role,
            sites: sites
                .iter()
                .map(|s| SiteCode::parse(s).expect("a site code"))
                .collect(),
            label: label.map(str::to_owned),
            secret_hash: Vec::new(),
            created_at: at,
            revoked_at: revoked.then_some(at),
        }
    }

    #[test]
    fn the_key_list_columns_line_up_however_long_the_cells() {
        let keys = [
            key(1, KeyRole::Admin, &[], Some("ops"), false),
            key(
                12,
                KeyRole::Ingest,
                &["KES", "MRQ", "ODW", "TLG", "VAL", "NORTH-WEST"],
                Some("line feed"),
                false,
            ),
            key(345, KeyRole::Read, &[], None, true),
        ];
        let table = key_table(&keys);
        let lines: Vec<&str> = table.lines().collect();
        assert_eq!(lines.len(), 4, "{table}");
        // Every column starts where its header does.
        for name in ["role", "status", "created", "sites", "label"] {
            let at = lines[0].find(name).expect("a header");
            for line in &lines[1..3] {
                let before = &line[..at];
                assert!(
                    before.ends_with("  ") && !line[at..].starts_with(' '),
                    "{name} at {at} in {line:?}\n{table}"
                );
            }
        }
        assert_eq!(
            lines[0],
            " id  role    status   created                      sites                           label"
        );
        assert_eq!(
            lines[2],
            " 12  ingest  active   2026-04-20T10:11:12.123456Z  KES,MRQ,ODW,TLG,VAL,NORTH-WEST  line feed"
        );
        assert_eq!(
            lines[3], "345  read    revoked  2026-04-20T10:11:12.123456Z  *",
            "no trailing blanks"
        );
    }
}

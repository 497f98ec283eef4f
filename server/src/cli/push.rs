//! `spreadscope push FILE… --to EDIT_LINK`: sends maps or shot files to a
//! running server, each under an idempotency key (SHA-256 of the dataset
//! name and the file's bytes), so a push retried after a lost answer never
//! stores a file twice and says it was already there.
//!
//! Exit codes: 0 every file is in the session, 2 bad input (a file, an
//! option, or a file the server refused, named), 1 anything else (the
//! server cannot be reached or failed).

use std::path::PathBuf;
use std::time::Duration;

use clap::Args;
use sha2::{Digest, Sha256};

use super::client::{self, SessionLink};
use super::error::CliError;
use crate::dataset::DatasetMeta;

#[derive(Debug, Args)]
pub struct PushArgs {
    /// Correlation maps (CSV, NPY, NPZ, JSON, HDF5) or, with `--shots`, shot
    /// records (CSV, NPZ, HDF5).
    #[arg(required = true)]
    pub files: Vec<PathBuf>,
    /// The session's edit link, e.g. `http://lab-pc:7878/s/TOKEN`.
    #[arg(long)]
    pub to: String,
    /// Dataset name (one file only); default the file name.
    #[arg(long)]
    pub name: Option<String>,
    /// Metadata field of the new datasets, e.g. `--meta alpha=1.5
    /// --meta platform="ion chain"` (fields as in the dashboard's metadata).
    #[arg(long = "meta", value_name = "KEY=VALUE")]
    pub meta: Vec<String>,
    /// The files are shot records; optional estimator options as
    /// `source=3&bootstrap=100` (names as in the shot upload).
    #[arg(long, value_name = "OPTIONS", num_args = 0..=1, default_missing_value = "")]
    pub shots: Option<String>,
    /// A PEM certificate to trust (a lab's self-signed one).
    #[arg(long)]
    pub ca: Option<PathBuf>,
    /// Seconds to wait for one answer before trying again.
    #[arg(long, default_value_t = 600)]
    pub timeout: u64,
    /// Tries per file when the connection fails or times out.
    #[arg(long, default_value_t = 3)]
    pub attempts: u32,
}

/// The idempotency key of a file pushed as `name`.
#[must_use]
pub fn push_key(name: &str, bytes: &[u8]) -> String {
    let mut h = Sha256::new();
    h.update(name.as_bytes());
    h.update([0]);
    h.update(bytes);
    let hex: String = h.finalize().iter().map(|b| format!("{b:02x}")).collect();
    format!("sha256-{hex}")
}

/// `KEY=VALUE` pairs as a metadata patch, checked against the metadata's
/// fields. Values that read as JSON numbers, booleans or null are those;
/// anything else is text.
///
/// # Errors
/// A pair without `=` or a field that does not exist or does not fit.
pub fn meta_patch(
    pairs: &[String],
) -> Result<serde_json::Map<String, serde_json::Value>, CliError> {
    let mut patch = serde_json::Map::new();
    for pair in pairs {
        let (key, value) = pair
            .split_once('=')
            .ok_or_else(|| CliError::Input(format!("--meta `{pair}`: expected KEY=VALUE")))?;
        let value = match serde_json::from_str::<serde_json::Value>(value) {
            Ok(
                v @ (serde_json::Value::Number(_)
                | serde_json::Value::Bool(_)
                | serde_json::Value::Null),
            ) => v,
            _ => serde_json::Value::String(value.to_string()),
        };
        patch.insert(key.trim().to_string(), value);
    }
    let probe: DatasetMeta = serde_json::from_value(serde_json::Value::Object(patch.clone()))
        .map_err(|e| CliError::Input(format!("--meta: {e}")))?;
    probe
        .validate()
        .map_err(|e| CliError::Input(format!("--meta: {e}")))?;
    Ok(patch)
}

/// Runs `spreadscope push`.
///
/// # Errors
/// See the module's exit codes.
pub fn run(args: &PushArgs) -> Result<(), CliError> {
    let link = client::parse_link(&args.to, "--to")?;
    if args.name.is_some() && args.files.len() > 1 {
        return Err(CliError::Input(
            "--name: give one FILE with --name (several files are named after themselves)".into(),
        ));
    }
    let patch = meta_patch(&args.meta)?;
    let agent = client::agent(args.ca.as_deref(), Duration::from_secs(args.timeout.max(1)))?;
    for path in &args.files {
        let shown = path.display().to_string();
        let bytes = std::fs::read(path).map_err(|e| CliError::Input(format!("{shown}: {e}")))?;
        let name = match &args.name {
            Some(n) => n.clone(),
            None => path
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .ok_or_else(|| CliError::Input(format!("{shown}: not a file name")))?,
        };
        let (summary, already) = upload(&agent, &link, args, &shown, &name, &bytes)?;
        let id = summary["id"]
            .as_i64()
            .ok_or_else(|| CliError::Failure(format!("{shown}: the answer has no dataset id")))?;
        if !patch.is_empty() {
            set_meta(&agent, &link, &shown, id, &summary, &patch)?;
        }
        if already {
            println!("{shown}: already there as dataset {id} “{name}” (nothing stored again)");
        } else {
            println!("{shown}: stored as dataset {id} “{name}”");
        }
    }
    Ok(())
}

fn upload(
    agent: &ureq::Agent,
    link: &SessionLink,
    args: &PushArgs,
    shown: &str,
    name: &str,
    bytes: &[u8],
) -> Result<(serde_json::Value, bool), CliError> {
    let key = push_key(name, bytes);
    let url = match &args.shots {
        Some(options) => {
            let mut url = format!(
                "{}/api/s/{}/shots?name={}",
                link.base,
                link.token,
                client::encode(name)
            );
            for pair in options.split('&').filter(|p| !p.is_empty()) {
                let (k, v) = pair.split_once('=').unwrap_or((pair, "true"));
                url.push_str(&format!("&{}={}", client::encode(k), client::encode(v)));
            }
            url
        }
        None => format!(
            "{}/api/s/{}/datasets?name={}",
            link.base,
            link.token,
            client::encode(name)
        ),
    };
    let mut last = String::new();
    for attempt in 1..=args.attempts.max(1) {
        match agent.post(&url).header("Idempotency-Key", &key).send(bytes) {
            Ok(response) => {
                let status = response.status().as_u16();
                let body = response
                    .into_body()
                    .read_to_string()
                    .map_err(|e| CliError::Failure(format!("{shown}: reading the answer: {e}")))?;
                return match status {
                    200 | 201 => {
                        let summary: serde_json::Value = serde_json::from_str(&body)
                            .map_err(|e| CliError::Failure(format!("{shown}: answer: {e}")))?;
                        Ok((summary, status == 200))
                    }
                    _ => Err(client::refusal(shown, status, &body)),
                };
            }
            Err(e) => {
                last = e.to_string();
                if attempt < args.attempts {
                    eprintln!(
                        "spreadscope: {shown}: {e}; trying again (same key: stored at most once)"
                    );
                    std::thread::sleep(Duration::from_secs(u64::from(attempt)));
                }
            }
        }
    }
    Err(CliError::Failure(format!("{shown}: {}: {last}", link.base)))
}

fn set_meta(
    agent: &ureq::Agent,
    link: &SessionLink,
    shown: &str,
    id: i64,
    summary: &serde_json::Value,
    patch: &serde_json::Map<String, serde_json::Value>,
) -> Result<(), CliError> {
    let mut meta = summary["meta"].clone();
    let Some(object) = meta.as_object_mut() else {
        return Err(CliError::Failure(format!(
            "{shown}: the answer has no metadata"
        )));
    };
    for (k, v) in patch {
        object.insert(k.clone(), v.clone());
    }
    let url = format!("{}/api/s/{}/datasets/{id}/meta", link.base, link.token);
    let response = agent
        .put(&url)
        .header("Content-Type", "application/json")
        .send(meta.to_string().as_bytes())
        .map_err(|e| CliError::Failure(format!("{shown}: metadata: {e}")))?;
    let status = response.status().as_u16();
    if status == 200 {
        return Ok(());
    }
    let body = response.into_body().read_to_string().unwrap_or_default();
    Err(client::refusal(&format!("{shown}: --meta"), status, &body))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn meta_pairs_are_checked_against_the_fields() {
        let patch = meta_patch(&["alpha=1.5".into(), "platform=ion chain".into()]).expect("valid");
        assert_eq!(patch["alpha"], serde_json::json!(1.5));
        assert_eq!(patch["platform"], serde_json::json!("ion chain"));
        assert!(matches!(
            meta_patch(&["colour=red".into()]),
            Err(CliError::Input(_))
        ));
        assert!(matches!(
            meta_patch(&["alpha".into()]),
            Err(CliError::Input(_))
        ));
        assert!(matches!(
            meta_patch(&["alpha=-1".into()]),
            Err(CliError::Input(_))
        ));
    }

    #[test]
    fn the_key_depends_on_name_and_bytes() {
        assert_eq!(push_key("a", b"x"), push_key("a", b"x"));
        assert_ne!(push_key("a", b"x"), push_key("b", b"x"));
        assert_ne!(push_key("a", b"x"), push_key("a", b"y"));
    }
}

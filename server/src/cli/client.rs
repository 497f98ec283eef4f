//! The HTTP client side of the command line (`push`, `archive`): session
//! links, one configured agent (optionally trusting a lab's self-signed
//! certificate), and the mapping of answers to exit codes. Talks only to
//! the server the user names.

use std::path::Path;
use std::time::Duration;

use super::error::CliError;

/// A session link split into the server's base URL and the token.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SessionLink {
    /// `scheme://host[:port]`
    pub base: String,
    pub token: String,
}

/// Splits `http(s)://host[:port]/s/TOKEN` (anything after the token is
/// ignored).
///
/// # Errors
/// A one-line reason naming `option`.
pub fn parse_link(link: &str, option: &str) -> Result<SessionLink, CliError> {
    let bad = |why: &str| CliError::Input(format!("{option} `{link}`: {why}"));
    let base = server_base(link, option)?;
    let rest = &link[base.len()..];
    let token = rest
        .strip_prefix("/s/")
        .ok_or_else(|| bad("expected a session link …/s/TOKEN"))?
        .split(['/', '?', '#'])
        .next()
        .unwrap_or_default();
    if token.len() != 32 || !token.bytes().all(|b| b.is_ascii_hexdigit()) {
        return Err(bad("the token after /s/ is not 32 hexadecimal digits"));
    }
    Ok(SessionLink {
        base,
        token: token.to_string(),
    })
}

/// `scheme://host[:port]` of a URL.
///
/// # Errors
/// Not an http or https URL.
pub fn server_base(url: &str, option: &str) -> Result<String, CliError> {
    let scheme_end = if url.starts_with("http://") {
        7
    } else if url.starts_with("https://") {
        8
    } else {
        return Err(CliError::Input(format!(
            "{option} `{url}`: expected a URL starting with http:// or https://"
        )));
    };
    let host_end = url[scheme_end..]
        .find('/')
        .map_or(url.len(), |i| scheme_end + i);
    if host_end == scheme_end {
        return Err(CliError::Input(format!("{option} `{url}`: no host")));
    }
    Ok(url[..host_end].to_string())
}

/// An agent that reports HTTP errors as answers, waits up to `timeout`,
/// and trusts the certificates in `ca` (PEM) besides the usual roots.
///
/// # Errors
/// The certificate file cannot be read or parsed.
pub fn agent(ca: Option<&Path>, timeout: Duration) -> Result<ureq::Agent, CliError> {
    let mut config = ureq::Agent::config_builder()
        .http_status_as_error(false)
        .timeout_global(Some(timeout));
    if let Some(path) = ca {
        let pem = std::fs::read(path)
            .map_err(|e| CliError::Input(format!("--ca {}: {e}", path.display())))?;
        let certs = ureq::tls::parse_pem(&pem)
            .filter_map(|item| match item {
                Ok(ureq::tls::PemItem::Certificate(c)) => Some(Ok(c)),
                Ok(_) => None,
                Err(e) => Some(Err(e)),
            })
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| CliError::Input(format!("--ca {}: {e}", path.display())))?;
        if certs.is_empty() {
            return Err(CliError::Input(format!(
                "--ca {}: no certificate in this file",
                path.display()
            )));
        }
        config = config.tls_config(
            ureq::tls::TlsConfig::builder()
                .root_certs(ureq::tls::RootCerts::new_with_certs(&certs))
                .build(),
        );
    }
    Ok(config.build().into())
}

/// Percent-encodes a query-string value (RFC 3986 unreserved characters
/// and `:,;` stay as they are).
#[must_use]
pub fn encode(value: &str) -> String {
    let mut out = String::with_capacity(value.len());
    for b in value.bytes() {
        if b.is_ascii_alphanumeric() || b"-_.~:,;".contains(&b) {
            out.push(char::from(b));
        } else {
            out.push_str(&format!("%{b:02X}"));
        }
    }
    out
}

/// The error text of a JSON answer (`error` and up to five `problems`).
#[must_use]
pub fn answer_error(body: &str) -> String {
    let Ok(value) = serde_json::from_str::<serde_json::Value>(body) else {
        return body.chars().take(300).collect();
    };
    let mut text = value["error"].as_str().unwrap_or("refused").to_string();
    if let Some(problems) = value["problems"].as_array() {
        for p in problems.iter().take(5) {
            let reason = p["reason"].as_str().unwrap_or_default();
            match p["line"].as_u64() {
                Some(line) => text.push_str(&format!("; line {line}: {reason}")),
                None => text.push_str(&format!("; {reason}")),
            }
        }
        if problems.len() > 5 {
            text.push_str(&format!("; … {} more", problems.len() - 5));
        }
    }
    text
}

/// Maps a refused answer to an exit code: bad input (4xx) or failure.
#[must_use]
pub fn refusal(what: &str, status: u16, body: &str) -> CliError {
    let reason = answer_error(body);
    match status {
        403 => CliError::Input(format!(
            "{what}: the link is read-only; this needs the session's edit link"
        )),
        404 => CliError::Input(format!("{what}: no such session on that server")),
        400..=499 if status != 408 && status != 429 => {
            CliError::Input(format!("{what}: refused: {reason}"))
        }
        _ => CliError::Failure(format!("{what}: the server answered {status}: {reason}")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn links_split_into_base_and_token() {
        let t = "0123456789abcdef0123456789abcdef";
        let link = parse_link(&format!("https://lab:7878/s/{t}/"), "--to").expect("parses");
        assert_eq!(link.base, "https://lab:7878");
        assert_eq!(link.token, t);
        assert!(parse_link("ftp://x/s/abc", "--to").is_err());
        assert!(parse_link("http://x/s/abc", "--to").is_err());
        assert_eq!(encode("a b&c:1"), "a%20b%26c:1");
    }
}

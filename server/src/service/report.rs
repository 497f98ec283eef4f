//! The self-contained session report: one HTML file with the session's
//! datasets (summaries, space-time maps on a log colour scale,
//! autocorrelations, sum rules), the pinned log with provenance, the
//! comparison of pinned z and D, and each pinned fit's figures (collapse at
//! its z, fitted C(0,t) law, model profiles). Opens from disk with no
//! server: plotting code and data are inlined. The page is the template
//! `report.html`, the drawing code `report.js`; numbers drawn in figures are
//! rounded to four significant digits to keep the file small.
//!
//! The api layer supplies the plotting library's text (it owns the embedded
//! assets) and serves the report with a content-security policy that allows
//! exactly the inline scripts whose hashes [`Report::script_hashes`] lists.

use serde::Serialize;
use serde_json::Value;
use sha2::{Digest, Sha256};

use super::log::{LogEntry, method_label};
use super::{
    Access, CONVENTIONS, DatasetSummary, PROGRAM_VERSION, Service, ServiceResult, now_utc,
};

/// One pinned fit's numbers, joined with its dataset's metadata.
#[derive(Debug, Clone, Serialize)]
pub struct ComparisonRow {
    pub entry: i64,
    pub dataset: Option<i64>,
    pub dataset_name: Option<String>,
    pub platform: Option<String>,
    pub alpha: Option<f64>,
    pub method: String,
    pub z: Option<f64>,
    pub z_err: Option<f64>,
    #[serde(rename = "D")]
    pub d: Option<f64>,
    #[serde(rename = "D_err")]
    pub d_err: Option<f64>,
    pub created_at: String,
    pub author: String,
    /// A later entry retracts this one.
    pub retracted: bool,
}

fn parameter(fit: &Value, name: &str) -> (Option<f64>, Option<f64>) {
    let p = &fit["parameters"][name];
    (p["value"].as_f64(), p["err"].as_f64())
}

/// Rows for every pinned entry that carries a fit with z or D.
#[must_use]
pub fn comparison_rows(entries: &[LogEntry], datasets: &[DatasetSummary]) -> Vec<ComparisonRow> {
    let retracted: std::collections::HashSet<i64> =
        entries.iter().filter_map(|e| e.retracts).collect();
    entries
        .iter()
        .filter_map(|e| {
            let fit = e.fit.as_ref()?;
            let (z, z_err) = parameter(fit, "z");
            let (d, d_err) = parameter(fit, "D");
            if z.is_none() && d.is_none() {
                return None;
            }
            let meta = e
                .dataset
                .and_then(|id| datasets.iter().find(|d| d.id == id))
                .map(|d| &d.meta);
            Some(ComparisonRow {
                entry: e.id,
                dataset: e.dataset,
                dataset_name: e.dataset_name.clone(),
                platform: meta.map(|m| m.platform.clone()),
                alpha: meta.and_then(|m| m.alpha),
                method: fit["method"].as_str().unwrap_or("").to_string(),
                z,
                z_err,
                d,
                d_err,
                created_at: e.created_at.clone(),
                author: e.author.clone(),
                retracted: retracted.contains(&e.id),
            })
        })
        .collect()
}

/// A rendered report.
#[derive(Debug, Clone)]
pub struct Report {
    pub html: String,
    /// `sha256-…` sources of every inline script, for the CSP header.
    pub script_hashes: Vec<String>,
}

fn escape(text: &str) -> String {
    text.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
        .replace('\'', "&#39;")
}

/// JSON safe to inline in a `<script>` element (no `</script>` break-out).
fn inline_json(value: &Value) -> String {
    value
        .to_string()
        .replace('<', "\\u003c")
        .replace('>', "\\u003e")
        .replace('&', "\\u0026")
}

fn script_hash(body: &str) -> String {
    use std::fmt::Write as _;
    let digest = Sha256::digest(body.as_bytes());
    // Standard base64, as CSP hash sources require.
    const TABLE: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut out = String::from("sha256-");
    for chunk in digest.chunks(3) {
        let b = [
            chunk[0],
            *chunk.get(1).unwrap_or(&0),
            *chunk.get(2).unwrap_or(&0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        for i in 0..4 {
            if i <= chunk.len() {
                let _ = write!(
                    out,
                    "{}",
                    TABLE[((n >> (18 - 6 * i)) & 63) as usize] as char
                );
            } else {
                out.push('=');
            }
        }
    }
    out
}

/// The drawing code of the report: reads the inlined data and draws each
/// figure with the inlined plotting library.
const DRAW_SCRIPT: &str = include_str!("report.js");

/// The page around the report's tables and figures; `{{NAME}}` marks are
/// filled in by [`Service::report`].
const TEMPLATE: &str = include_str!("report.html");

/// Significant digits kept for the numbers drawn in the report's figures
/// (a figure cannot show more; the tables and the log keep full values).
const FIGURE_DIGITS: i32 = 4;

/// `value` with every number rounded to [`FIGURE_DIGITS`] significant
/// digits, so the inlined data stay small.
fn compact(value: &Value) -> Value {
    match value {
        Value::Number(n) if n.is_f64() => n.as_f64().map_or(Value::Null, |v| {
            if v == 0.0 || !v.is_finite() {
                return Value::from(v);
            }
            let scale = 10f64.powi(FIGURE_DIGITS - 1 - v.abs().log10().floor() as i32);
            Value::from((v * scale).round() / scale)
        }),
        Value::Array(items) => Value::Array(items.iter().map(compact).collect()),
        Value::Object(map) => {
            Value::Object(map.iter().map(|(k, v)| (k.clone(), compact(v))).collect())
        }
        other => other.clone(),
    }
}

/// What the report draws for one pinned fit: the collapse at its z, its
/// fitted C(0,t) law, and its model profiles at up to four times. The fit is
/// read as it was stored in the log.
fn fit_figure(entry: &LogEntry, fit: &Value) -> FitFigure {
    let profile = fit["overlay"].get("profile").map(|p| {
        let t = p["t"].as_array().cloned().unwrap_or_default();
        let n = t.len();
        let picks: Vec<usize> = if n <= 4 {
            (0..n).collect()
        } else {
            (0..4).map(|k| k * (n - 1) / 3).collect()
        };
        ProfilePicks {
            x: p["x"].clone(),
            t: picks.iter().map(|&i| t[i].clone()).collect(),
            c: picks.iter().map(|&i| p["C"][i].clone()).collect(),
        }
    });
    FitFigure {
        entry: entry.id,
        dataset: entry.dataset,
        method: fit["method"].clone(),
        z: fit["parameters"]["z"]["value"].clone(),
        windows: fit["windows"].clone(),
        tail: fit["overlay"].get("tail").cloned(),
        profile,
    }
}

/// The figures' data inlined into the report.
#[derive(Debug, Serialize)]
struct ReportData {
    datasets: Vec<DatasetFigure>,
    comparison: Vec<ComparisonRow>,
    fits: Vec<FitFigure>,
}

/// One dataset's map, autocorrelation and sum rule.
#[derive(Debug, Serialize)]
struct DatasetFigure {
    id: i64,
    x: Vec<i32>,
    t: Vec<f64>,
    #[serde(rename = "C")]
    c: Vec<Vec<Option<f64>>>,
    time_unit: String,
    auto: Option<Series>,
    sum: SumSeries,
}

/// C(0,t) with its errors when known.
#[derive(Debug, Serialize)]
struct Series {
    t: Vec<f64>,
    #[serde(rename = "C")]
    c: Vec<f64>,
    err: Option<Vec<f64>>,
}

/// Σ_x C(x,t) with its errors when known.
#[derive(Debug, Serialize)]
struct SumSeries {
    t: Vec<f64>,
    sum: Vec<f64>,
    err: Option<Vec<f64>>,
}

/// A pinned fit's figure data, taken from the stored entry.
#[derive(Debug, Serialize)]
struct FitFigure {
    entry: i64,
    dataset: Option<i64>,
    method: Value,
    z: Value,
    windows: Value,
    tail: Option<Value>,
    profile: Option<ProfilePicks>,
}

/// A fitted profile at up to four of its times.
#[derive(Debug, Serialize)]
struct ProfilePicks {
    x: Value,
    t: Vec<Value>,
    #[serde(rename = "C")]
    c: Vec<Value>,
}

impl Service {
    /// Pinned z and D across the session's datasets.
    ///
    /// # Errors
    /// Database failure.
    pub async fn comparison(&self, access: &Access) -> ServiceResult<Vec<ComparisonRow>> {
        let entries = self.log(access).await?;
        let datasets = self.datasets(access).await?;
        Ok(comparison_rows(&entries, &datasets))
    }

    /// Renders the self-contained report. `plotting_library` is the text of
    /// the plotting library to inline.
    ///
    /// # Errors
    /// Database failure.
    pub async fn report(&self, access: &Access, plotting_library: &str) -> ServiceResult<Report> {
        let entries = self.log(access).await?;
        let summaries = self.datasets(access).await?;
        let comparison = comparison_rows(&entries, &summaries);
        let mut figures = Vec::new();
        let mut sections = String::new();
        for summary in &summaries {
            let (_, map) = self.dataset(access, summary.id).await?;
            let grid: Vec<Vec<Option<f64>>> = map
                .values()
                .outer_iter()
                .zip(map.present().outer_iter())
                .map(|(row, mask)| {
                    row.iter()
                        .zip(mask)
                        .map(|(&v, &p)| p.then_some(v))
                        .collect()
                })
                .collect();
            let sums = map.sum_rule();
            let auto = map.autocorrelation().map(|a| Series {
                t: a.iter().map(|p| p.0).collect(),
                c: a.iter().map(|p| p.1).collect(),
                err: a.iter().map(|p| p.2).collect(),
            });
            figures.push(DatasetFigure {
                id: summary.id,
                x: map.offsets().to_vec(),
                t: map.times().to_vec(),
                c: grid,
                time_unit: summary.meta.time_unit.clone(),
                auto,
                sum: SumSeries {
                    t: sums.iter().map(|p| p.t).collect(),
                    sum: sums.iter().map(|p| p.sum).collect(),
                    err: sums.iter().map(|p| p.err).collect(),
                },
            });
            let m = &summary.meta;
            sections.push_str(&format!(
                "<section><h2>{name}</h2><table class=kv>\
                 <tr><th>content hash</th><td><code>{hash}</code></td></tr>\
                 <tr><th>grid</th><td>{sites} offsets ({x0} … {x1}) × {times} times ({t0} … {t1} {unit}), {missing} missing</td></tr>\
                 <tr><th>Σ<sub>x</sub> C range</th><td>{s0:.4} … {s1:.4}</td></tr>\
                 <tr><th>platform</th><td>{platform}</td></tr>\
                 <tr><th>nominal α</th><td>{alpha}</td></tr>\
                 <tr><th>chain, source</th><td>{chain}, {source}</td></tr>\
                 <tr><th>synthetic</th><td>{synthetic}</td></tr>\
                 <tr><th>notes</th><td>{notes}</td></tr></table>\
                 <div class=figs><div id=map-{id} class=fig></div><div id=auto-{id} class=fig></div>\
                 <div id=sum-{id} class=fig></div></div></section>",
                name = escape(&summary.name),
                hash = summary.content_hash,
                sites = summary.sites,
                x0 = summary.x_range[0],
                x1 = summary.x_range[1],
                times = summary.times,
                t0 = summary.t_range[0],
                t1 = summary.t_range[1],
                unit = escape(&m.time_unit),
                missing = summary.missing,
                s0 = summary.sum_rule_range[0],
                s1 = summary.sum_rule_range[1],
                platform = escape(&m.platform),
                alpha = m.alpha.map_or("—".into(), |a| a.to_string()),
                chain = m.chain_length.map_or("—".into(), |n| format!("{n} sites")),
                source = m.source_site.map_or("—".into(), |j| format!("site {j}")),
                synthetic = if m.synthetic { "yes (made by a model, not measured)" } else { "no" },
                notes = escape(&m.notes),
                id = summary.id,
            ));
        }
        let retracted: std::collections::HashSet<i64> =
            entries.iter().filter_map(|e| e.retracts).collect();
        let mut log_rows = String::new();
        for e in &entries {
            let fit = e.fit.as_ref().map_or(String::new(), |f| {
                format!(
                    "{method}: {params}",
                    method = escape(method_label(f["method"].as_str().unwrap_or("fit"))),
                    params = escape(&parameters_text(f)),
                )
            });
            log_rows.push_str(&format!(
                "<tr class=\"{class}\"><td>{id}</td><td>{at}</td><td>{author}</td><td>{dataset}</td>\
                 <td>{comment}{retracts}</td><td>{fit}</td><td>{version}</td></tr>",
                class = if retracted.contains(&e.id) { "retracted" } else { "" },
                id = e.id,
                at = escape(&e.created_at),
                author = escape(&e.author),
                dataset = e.dataset_name.as_deref().map_or(String::new(), |n| format!(
                    "{}<br><code>{}</code>",
                    escape(n),
                    e.dataset_hash.as_deref().map_or("", |h| &h[..12.min(h.len())])
                )),
                comment = escape(&e.comment),
                retracts = e.retracts.map_or(String::new(), |r| format!(" <em>(retracts entry {r})</em>")),
                version = escape(&e.program_version),
            ));
        }
        let mut compare_rows = String::new();
        for r in &comparison {
            let pm = |v: Option<f64>, e: Option<f64>| match (v, e) {
                (Some(v), Some(e)) => format!("{v:.4} ± {e:.4}"),
                (Some(v), None) => format!("{v:.4}"),
                _ => "—".into(),
            };
            compare_rows.push_str(&format!(
                "<tr class=\"{class}\"><td>{entry}</td><td>{name}</td><td>{platform}</td><td>{alpha}</td>\
                 <td>{method}</td><td>{z}</td><td>{d}</td></tr>",
                class = if r.retracted { "retracted" } else { "" },
                entry = r.entry,
                name = escape(r.dataset_name.as_deref().unwrap_or("—")),
                platform = escape(r.platform.as_deref().unwrap_or("—")),
                alpha = r.alpha.map_or("—".into(), |a| a.to_string()),
                method = escape(method_label(&r.method)),
                z = pm(r.z, r.z_err),
                d = pm(r.d, r.d_err),
            ));
        }
        let mut fits = Vec::new();
        let mut fit_sections = String::new();
        for e in &entries {
            let Some(fit) = e.fit.as_ref().filter(|_| !retracted.contains(&e.id)) else {
                continue;
            };
            if e.dataset
                .is_none_or(|id| !summaries.iter().any(|s| s.id == id))
            {
                continue;
            }
            let figure = fit_figure(e, fit);
            let mut divs = String::new();
            for (kind, present) in [
                ("collapse", figure.z.is_number()),
                ("tail", figure.tail.as_ref().is_some_and(Value::is_object)),
                ("profile", figure.profile.is_some()),
            ] {
                if present {
                    divs.push_str(&format!(
                        "<div id=fit-{kind}-{id} class=fig></div>",
                        id = e.id
                    ));
                }
            }
            if divs.is_empty() {
                continue;
            }
            fit_sections.push_str(&format!(
                "<div class=fit><h3>Entry {id}: {method} on {dataset}</h3><p>{params}</p>\
                 <div class=figs>{divs}</div></div>",
                id = e.id,
                method = escape(method_label(fit["method"].as_str().unwrap_or("fit"))),
                dataset = escape(e.dataset_name.as_deref().unwrap_or("—")),
                params = escape(&parameters_text(fit)),
            ));
            fits.push(figure);
        }
        if fit_sections.is_empty() {
            fit_sections.push_str("<p>No pinned fit with curves to draw.</p>");
        }
        let data = serde_json::to_value(ReportData {
            datasets: figures,
            comparison,
            fits,
        })
        .map_err(|e| super::ServiceError::Internal(e.to_string()))?;
        let data = compact(&data);
        let scripts = [plotting_library, DRAW_SCRIPT];
        let script_hashes = scripts.iter().map(|s| script_hash(s)).collect();
        // Fill the marks in one pass, so text inserted for one mark is
        // never searched for another.
        let title = escape(&access.session.name);
        let now = now_utc();
        let conventions = escape(CONVENTIONS);
        let data = inline_json(&data);
        let fill = |mark: &str| -> Option<&str> {
            Some(match mark {
                "TITLE" => &title,
                "NOW" => &now,
                "VERSION" => PROGRAM_VERSION,
                "CONVENTIONS" => &conventions,
                "LOG_ROWS" => &log_rows,
                "COMPARE_ROWS" => &compare_rows,
                "FIT_SECTIONS" => &fit_sections,
                "DATASET_SECTIONS" => &sections,
                "DATA" => &data,
                "LIBRARY" => plotting_library,
                "DRAW" => DRAW_SCRIPT,
                _ => return None,
            })
        };
        let mut html = String::with_capacity(TEMPLATE.len() + plotting_library.len() + data.len());
        let mut rest = TEMPLATE;
        while let Some(start) = rest.find("{{") {
            html.push_str(&rest[..start]);
            let after = &rest[start + 2..];
            match after
                .find("}}")
                .and_then(|end| Some((end, fill(&after[..end])?)))
            {
                Some((end, text)) => {
                    html.push_str(text);
                    rest = &after[end + 2..];
                }
                None => {
                    html.push_str("{{");
                    rest = after;
                }
            }
        }
        html.push_str(rest);
        Ok(Report {
            html,
            script_hashes,
        })
    }
}

/// The verdict's headline (analysis only), then every parameter as
/// "value ± stat (stat) ± window (window)" when the window error is known.
fn parameters_text(fit: &Value) -> String {
    let params = fit["parameters"]
        .as_object()
        .map(|params| {
            params
                .iter()
                .map(|(name, p)| {
                    match (
                        p["value"].as_f64(),
                        p["err"].as_f64(),
                        p["err_sys"].as_f64(),
                    ) {
                        (Some(v), Some(e), Some(w)) => {
                            format!("{name} = {v:.4} ± {e:.4} (stat) ± {w:.4} (window)")
                        }
                        (Some(v), Some(e), None) => format!("{name} = {v:.4} ± {e:.4}"),
                        (Some(v), None, _) => format!("{name} = {v:.4}"),
                        _ => name.clone(),
                    }
                })
                .collect::<Vec<_>>()
                .join(", ")
        })
        .unwrap_or_default();
    match fit["verdict"]["headline"].as_str() {
        Some(h) => format!("verdict {h}; {params}"),
        None => params,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csp_hashes_are_standard_base64_sha256() {
        // sha256("") = e3b0c442…b855, whose base64 is the well-known
        // 47DEQpj8HBSa+/TImW+5JCeuQeRkm5NMpJWZG3hSuFU= (RFC 4648 encoding of
        // the FIPS 180-4 empty-string digest).
        assert_eq!(
            script_hash(""),
            "sha256-47DEQpj8HBSa+/TImW+5JCeuQeRkm5NMpJWZG3hSuFU="
        );
    }

    #[test]
    fn inline_json_cannot_close_the_script_element() {
        let text = inline_json(&serde_json::json!({"name": "</script><script>alert(1)</script>"}));
        assert!(!text.contains("</script>"));
    }
}

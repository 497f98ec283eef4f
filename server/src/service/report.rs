//! The self-contained session report: one HTML file with the session's
//! datasets (summaries, space-time maps, autocorrelations, sum rules), the
//! pinned log with provenance, and the comparison of pinned z and D. Opens
//! from disk with no server: plotting code and data are inlined.
//!
//! The api layer supplies the plotting library's text (it owns the embedded
//! assets) and serves the report with a content-security policy that allows
//! exactly the inline scripts whose hashes [`Report::script_hashes`] lists.

use serde::Serialize;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};

use super::log::LogEntry;
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
const DRAW_SCRIPT: &str = r#"
(function () {
  var data = JSON.parse(document.getElementById('report-data').textContent);
  var layout = function (title, xt, yt, extra) {
    var l = { title: { text: title }, margin: { l: 70, r: 20, t: 40, b: 55 },
      xaxis: { title: { text: xt } }, yaxis: { title: { text: yt } }, font: { size: 14 } };
    for (var k in extra) { l[k] = extra[k]; }
    return l;
  };
  data.datasets.forEach(function (d) {
    Plotly.newPlot('map-' + d.id, [{ type: 'heatmap', x: d.x, y: d.t, z: d.C,
      colorscale: 'Cividis', colorbar: { title: { text: 'C' } } }],
      layout('Space-time map', 'x (sites)', 't (' + d.time_unit + ')', {}), { staticPlot: true });
    if (d.auto) {
      Plotly.newPlot('auto-' + d.id, [{ x: d.auto.t, y: d.auto.C, mode: 'markers',
        error_y: { type: 'data', array: d.auto.err, visible: d.auto.err !== null } }],
        layout('Autocorrelation C(0,t)', 't', 'C(0,t)',
          { xaxis: { type: 'log', title: { text: 't' } }, yaxis: { type: 'log', title: { text: 'C(0,t)' } } }),
        { staticPlot: true });
    }
    Plotly.newPlot('sum-' + d.id, [{ x: d.sum.t, y: d.sum.sum, mode: 'markers',
      error_y: { type: 'data', array: d.sum.err, visible: d.sum.err !== null } }],
      layout('Sum rule', 't', 'Σx C(x,t)', { shapes: [{ type: 'line', xref: 'paper', x0: 0, x1: 1,
        y0: 1, y1: 1, line: { dash: 'dot' } }] }), { staticPlot: true });
  });
  var rows = data.comparison.filter(function (r) { return !r.retracted && r.z !== null && r.alpha !== null; });
  if (rows.length > 0) {
    var a = [], line = [];
    for (var i = 0; i <= 60; i++) { var al = 0.5 + i * 0.025; a.push(al); line.push(Math.min(2 * al - 1, 2)); }
    Plotly.newPlot('compare', [
      { x: rows.map(function (r) { return r.alpha; }), y: rows.map(function (r) { return r.z; }),
        error_y: { type: 'data', array: rows.map(function (r) { return r.z_err || 0; }) },
        mode: 'markers', name: 'pinned z' },
      { x: a, y: line, mode: 'lines', name: 'z = min(2α − 1, 2)' }],
      layout('Pinned z versus nominal α', 'α', 'z', {}), { staticPlot: true });
  }
})();
"#;

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
            let auto = map.autocorrelation().map(|a| {
                json!({
                    "t": a.iter().map(|p| p.0).collect::<Vec<_>>(),
                    "C": a.iter().map(|p| p.1).collect::<Vec<_>>(),
                    "err": a.iter().map(|p| p.2).collect::<Option<Vec<_>>>(),
                })
            });
            figures.push(json!({
                "id": summary.id,
                "x": map.offsets(),
                "t": map.times(),
                "C": grid,
                "time_unit": summary.meta.time_unit,
                "auto": auto,
                "sum": {
                    "t": sums.iter().map(|p| p.t).collect::<Vec<_>>(),
                    "sum": sums.iter().map(|p| p.sum).collect::<Vec<_>>(),
                    "err": sums.iter().map(|p| p.err).collect::<Option<Vec<_>>>(),
                },
            }));
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
                    "<details><summary>{method}: {params}</summary><pre>{json}</pre></details>",
                    method = escape(f["method"].as_str().unwrap_or("fit")),
                    params = escape(&parameters_text(f)),
                    json = escape(&serde_json::to_string_pretty(f).unwrap_or_default()),
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
                method = escape(&r.method),
                z = pm(r.z, r.z_err),
                d = pm(r.d, r.d_err),
            ));
        }
        let data = json!({"datasets": figures, "comparison": comparison});
        let scripts = [plotting_library, DRAW_SCRIPT];
        let script_hashes = scripts.iter().map(|s| script_hash(s)).collect();
        let html = format!(
            "<!doctype html><html lang=en><head><meta charset=utf-8>\
             <title>{title} — spreadscope report</title><style>{STYLE}</style></head><body>\
             <header><h1>{title}</h1><p>Report exported {now} by {PROGRAM_VERSION}.</p>\
             <p class=conv>Conventions: {conv}</p></header>\
             <h2>Pinned log</h2><table class=log><thead><tr><th>#</th><th>time (UTC)</th><th>author</th>\
             <th>dataset</th><th>comment</th><th>result</th><th>program</th></tr></thead><tbody>{log_rows}</tbody></table>\
             <h2>Comparison of pinned results</h2><table class=log><thead><tr><th>entry</th><th>dataset</th>\
             <th>platform</th><th>nominal α</th><th>method</th><th>z</th><th>D</th></tr></thead>\
             <tbody>{compare_rows}</tbody></table><div id=compare class=fig></div>\
             <h2>Datasets</h2>{sections}\
             <script id=report-data type=\"application/json\">{data}</script>\
             <script>{lib}</script><script>{DRAW_SCRIPT}</script></body></html>",
            title = escape(&access.session.name),
            now = now_utc(),
            conv = escape(CONVENTIONS),
            data = inline_json(&data),
            lib = plotting_library,
        );
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

const STYLE: &str = "body{font:17px/1.45 system-ui,sans-serif;margin:2rem auto;max-width:1200px;\
padding:0 1rem;color:#15171c}h1{margin-bottom:.2rem}table{border-collapse:collapse;margin:.5rem 0 1.5rem}\
th,td{border:1px solid #c9ccd3;padding:.3rem .5rem;text-align:left;vertical-align:top}\
.kv th{background:#f1f2f5}.log thead th{background:#f1f2f5}.retracted td{text-decoration:line-through;color:#777}\
.figs{display:flex;flex-wrap:wrap;gap:1rem}.fig{width:560px;height:380px}.conv{font-size:.9rem;color:#444}\
pre{white-space:pre-wrap;font-size:.8rem}section{border-top:2px solid #a3195b;margin-top:2rem}";

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
        let text = inline_json(&json!({"name": "</script><script>alert(1)</script>"}));
        assert!(!text.contains("</script>"));
    }
}

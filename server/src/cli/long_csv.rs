//! Maps written as long CSV `x,t,C[,err]` with `# key: value` header lines,
//! the layout the CSV reader (`ingest::csv`) takes back. Every number is
//! printed in Rust's shortest round-trip form, so reading the file back gives
//! the same bits.

use std::fmt::Write as _;

use spreadscope_physics::CorrelationMap;

/// The map as long CSV with provenance comments and metadata lines.
#[must_use]
pub fn to_long_csv(map: &CorrelationMap, header: &[String]) -> String {
    let mut out = String::new();
    for line in header {
        let _ = writeln!(out, "# {line}");
    }
    let with_err = map.errors().is_some();
    out.push_str(if with_err { "x,t,C,err\n" } else { "x,t,C\n" });
    for (ti, t) in map.times().iter().enumerate() {
        for (xi, x) in map.offsets().iter().enumerate() {
            if let Some((c, e)) = map.get(ti, xi) {
                match e {
                    Some(e) if with_err => {
                        let _ = writeln!(out, "{x},{t:?},{c:?},{e:?}");
                    }
                    _ => {
                        let _ = writeln!(out, "{x},{t:?},{c:?}");
                    }
                }
            }
        }
    }
    out
}

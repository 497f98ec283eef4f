//! A bounded load check of a running server on loopback: readers fetch the
//! log, writers pin entries, each over its own keep-alive connection, for a
//! fixed duration; then every acknowledged pin is looked up in the log.
//!
//! Used by `cargo run --release --example load` (the documented 30 s run)
//! and by a short test. It only ever connects to the address it is given,
//! which callers take from a server they started on 127.0.0.1.

use std::net::SocketAddr;
use std::time::{Duration, Instant};

use serde::Serialize;
use tokio::io::{AsyncBufReadExt, AsyncReadExt, AsyncWriteExt, BufReader};
use tokio::net::TcpStream;

/// What to run.
#[derive(Debug, Clone)]
pub struct LoadPlan {
    pub addr: SocketAddr,
    pub edit_token: String,
    pub readers: usize,
    pub writers: usize,
    pub duration: Duration,
}

/// What happened.
#[derive(Debug, Clone, Serialize)]
pub struct LoadReport {
    pub reads: usize,
    pub writes: usize,
    pub errors: usize,
    pub read_p50_ms: f64,
    pub read_p99_ms: f64,
    pub write_p50_ms: f64,
    pub write_p99_ms: f64,
    pub lost_pins: usize,
}

struct Connection {
    reader: BufReader<TcpStream>,
    host: String,
}

impl Connection {
    async fn open(addr: SocketAddr) -> std::io::Result<Self> {
        let stream = TcpStream::connect(addr).await?;
        stream.set_nodelay(true)?;
        Ok(Self {
            reader: BufReader::new(stream),
            host: addr.to_string(),
        })
    }

    /// One request on the kept-alive connection; returns status and body.
    async fn request(
        &mut self,
        method: &str,
        path: &str,
        body: &str,
    ) -> std::io::Result<(u16, Vec<u8>)> {
        let head = format!(
            "{method} {path} HTTP/1.1\r\nHost: {}\r\nContent-Type: application/json\r\nContent-Length: {}\r\n\r\n",
            self.host,
            body.len()
        );
        let stream = self.reader.get_mut();
        stream.write_all(head.as_bytes()).await?;
        stream.write_all(body.as_bytes()).await?;
        let mut line = String::new();
        self.reader.read_line(&mut line).await?;
        let status = line
            .split_whitespace()
            .nth(1)
            .and_then(|s| s.parse().ok())
            .ok_or_else(|| std::io::Error::other(format!("bad status line `{line}`")))?;
        let mut length = 0usize;
        loop {
            line.clear();
            self.reader.read_line(&mut line).await?;
            let trimmed = line.trim_end();
            if trimmed.is_empty() {
                break;
            }
            if let Some((name, value)) = trimmed.split_once(':') {
                if name.eq_ignore_ascii_case("content-length") {
                    length = value.trim().parse().unwrap_or(0);
                }
            }
        }
        let mut body = vec![0; length];
        self.reader.read_exact(&mut body).await?;
        Ok((status, body))
    }
}

fn percentile_ms(samples: &mut [Duration], q: f64) -> f64 {
    if samples.is_empty() {
        return f64::NAN;
    }
    samples.sort_unstable();
    let index = ((samples.len() - 1) as f64 * q).round() as usize;
    samples[index].as_secs_f64() * 1e3
}

/// Runs the plan to its end and checks that no acknowledged pin is missing.
///
/// # Errors
/// The final read of the log fails.
pub async fn run(plan: &LoadPlan) -> std::io::Result<LoadReport> {
    let deadline = Instant::now() + plan.duration;
    let log_path = format!("/api/s/{}/log", plan.edit_token);
    let mut tasks = Vec::new();
    for w in 0..(plan.readers + plan.writers) {
        let is_writer = w < plan.writers;
        let (addr, path) = (plan.addr, log_path.clone());
        tasks.push(tokio::spawn(async move {
            let mut latencies = Vec::new();
            let mut acked = Vec::new();
            let mut errors = 0usize;
            let mut conn = None;
            let mut n = 0u64;
            while Instant::now() < deadline {
                if conn.is_none() {
                    match Connection::open(addr).await {
                        Ok(c) => conn = Some(c),
                        Err(_) => {
                            errors += 1;
                            tokio::time::sleep(Duration::from_millis(10)).await;
                            continue;
                        }
                    }
                }
                let Some(c) = conn.as_mut() else { continue };
                let started = Instant::now();
                let outcome = if is_writer {
                    n += 1;
                    let body = format!(r#"{{"author":"load writer {w}","comment":"pin {n}"}}"#);
                    c.request("POST", &path, &body).await
                } else {
                    c.request("GET", &path, "").await
                };
                match outcome {
                    Ok((status, body)) if (200..300).contains(&status) => {
                        latencies.push(started.elapsed());
                        if is_writer {
                            let id = serde_json::from_slice::<serde_json::Value>(&body)
                                .ok()
                                .and_then(|v| v["id"].as_i64());
                            match id {
                                Some(id) => acked.push(id),
                                None => errors += 1,
                            }
                        }
                    }
                    _ => {
                        errors += 1;
                        conn = None;
                    }
                }
            }
            (is_writer, latencies, acked, errors)
        }));
    }
    let (mut reads, mut writes, mut acked, mut errors) = (Vec::new(), Vec::new(), Vec::new(), 0);
    for task in tasks {
        let (is_writer, latencies, ids, errs) = task.await.map_err(std::io::Error::other)?;
        errors += errs;
        acked.extend(ids);
        if is_writer {
            writes.extend(latencies);
        } else {
            reads.extend(latencies);
        }
    }
    let mut conn = Connection::open(plan.addr).await?;
    let (_, body) = conn.request("GET", &log_path, "").await?;
    let log: serde_json::Value = serde_json::from_slice(&body).map_err(std::io::Error::other)?;
    let stored: std::collections::HashSet<i64> = log
        .as_array()
        .map(|a| a.iter().filter_map(|e| e["id"].as_i64()).collect())
        .unwrap_or_default();
    let lost_pins = acked.iter().filter(|id| !stored.contains(id)).count();
    Ok(LoadReport {
        reads: reads.len(),
        writes: writes.len(),
        errors,
        read_p50_ms: percentile_ms(&mut reads, 0.5),
        read_p99_ms: percentile_ms(&mut reads, 0.99),
        write_p50_ms: percentile_ms(&mut writes, 0.5),
        write_p99_ms: percentile_ms(&mut writes, 0.99),
        lost_pins,
    })
}

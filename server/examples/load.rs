//! The documented load run: starts spreadscope on 127.0.0.1 (a free port, a
//! temporary data directory), drives 50 readers and 10 writers for 30 s
//! (change with `--readers N --writers N --seconds S`), prints p50/p99
//! latencies, errors and lost pins, and stops by itself.
//!
//! `cargo run --release --example load`

use std::time::Duration;

use spreadscope::api::ApiConfig;
use spreadscope::app::{self, App};
use spreadscope::loadcheck::{LoadPlan, run};

fn arg(name: &str, default: u64) -> u64 {
    let args: Vec<String> = std::env::args().collect();
    args.iter()
        .position(|a| a == name)
        .and_then(|i| args.get(i + 1))
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

#[tokio::main]
async fn main() -> Result<(), Box<dyn std::error::Error>> {
    let dir = std::env::temp_dir().join(format!("spreadscope-load-{}", std::process::id()));
    let app = App::open(&dir, &ApiConfig::default()).await?;
    let session = app.service.sessions().await?.remove(0);
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await?;
    let addr = listener.local_addr()?;
    let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
    let server = tokio::spawn(app::serve(listener, app.router, async {
        let _ = stopped.await;
    }));
    let plan = LoadPlan {
        addr,
        edit_token: session.edit_token,
        readers: usize::try_from(arg("--readers", 50))?,
        writers: usize::try_from(arg("--writers", 10))?,
        duration: Duration::from_secs(arg("--seconds", 30)),
    };
    println!(
        "load: {} readers, {} writers, {:?} against http://{addr}",
        plan.readers, plan.writers, plan.duration
    );
    let report = run(&plan).await?;
    println!("{}", serde_json::to_string_pretty(&report)?);
    let _ = stop.send(());
    server.await??;
    std::fs::remove_dir_all(&dir)?;
    Ok(())
}

//! App: wires store, service and api together and runs the server.
//!
//! `serve` takes a bound listener and a shutdown future, so tests can run a
//! real server on port 0 and stop it; `main.rs` stays a shim.

use std::future::Future;
use std::net::SocketAddr;
use std::path::Path;

use axum::Router;
use tokio::net::TcpListener;

use crate::api::{self, ApiConfig};
use crate::service::{Service, ServiceConfig};
use crate::store::Store;

/// Everything the server needs, built from a data directory.
#[derive(Debug, Clone)]
pub struct App {
    pub service: Service,
    pub router: Router,
}

impl App {
    /// Opens (or creates) the data directory and builds the router. A data
    /// directory without sessions gets the demo session.
    ///
    /// # Errors
    /// The directory or database cannot be opened, or the demo fails to load.
    pub async fn open(data_dir: &Path, api: &ApiConfig) -> Result<Self, String> {
        std::fs::create_dir_all(data_dir)
            .map_err(|e| format!("data directory {}: {e}", data_dir.display()))?;
        let store = Store::open_dir(data_dir).map_err(|e| e.to_string())?;
        Self::with_store(store, api).await
    }

    /// Builds the app over an existing store (tests use an in-memory one).
    ///
    /// # Errors
    /// The demo session fails to load.
    pub async fn with_store(store: Store, api: &ApiConfig) -> Result<Self, String> {
        let service = Service::new(store, &ServiceConfig::default());
        service.ensure_demo().await.map_err(|e| e.to_string())?;
        let router = api::router(service.clone(), api);
        Ok(Self { service, router })
    }
}

/// Serves `router` on `listener` until `shutdown` resolves; in-flight
/// requests finish first.
///
/// # Errors
/// The listener fails.
pub async fn serve(
    listener: TcpListener,
    router: Router,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    axum::serve(listener, router.into_make_service())
        .with_graceful_shutdown(shutdown)
        .await
}

/// A future that resolves on Ctrl-C or SIGTERM. The handlers are registered
/// when this is called, not when the future is first polled, so a signal sent
/// right after the links are printed is never missed (call it before printing).
///
/// # Errors
/// The signal handlers cannot be registered.
pub fn shutdown_signal() -> std::io::Result<impl Future<Output = ()> + Send + 'static> {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{SignalKind, signal};
        let mut interrupt = signal(SignalKind::interrupt())?;
        let mut term = signal(SignalKind::terminate())?;
        Ok(async move {
            tokio::select! {
                _ = interrupt.recv() => {},
                _ = term.recv() => {},
            }
        })
    }
    #[cfg(not(unix))]
    {
        Ok(async {
            let _ = tokio::signal::ctrl_c().await;
        })
    }
}

/// Prints the links of every session the server holds.
///
/// # Errors
/// Database failure.
pub async fn print_links(service: &Service, addr: SocketAddr) -> Result<(), String> {
    print_links_with(service, "http", addr).await
}

/// Prints the links of every session with the given URL scheme.
///
/// # Errors
/// Database failure.
pub async fn print_links_with(
    service: &Service,
    scheme: &str,
    addr: SocketAddr,
) -> Result<(), String> {
    let sessions = service.sessions().await.map_err(|e| e.to_string())?;
    println!("spreadscope serving at {scheme}://{addr}");
    for s in sessions {
        println!("  session \"{}\"", s.name);
        println!("    edit: {scheme}://{addr}/s/{}", s.edit_token);
        println!("    view: {scheme}://{addr}/s/{}", s.view_token);
    }
    Ok(())
}

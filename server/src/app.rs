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

/// Resolves on Ctrl-C or SIGTERM.
pub async fn shutdown_signal() {
    let ctrl_c = async {
        let _ = tokio::signal::ctrl_c().await;
    };
    #[cfg(unix)]
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let term = std::future::pending::<()>();
    tokio::select! {
        () = ctrl_c => {},
        () = term => {},
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

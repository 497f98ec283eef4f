//! HTTPS for `serve --tls-cert FILE --tls-key FILE`: rustls (with the `ring`
//! cryptography) behind axum-server, serving the same router as plain HTTP.
//! A lab makes a self-signed pair with the `openssl` command in the README
//! and gives clients the certificate to trust.

use std::future::Future;
use std::path::Path;
use std::time::Duration;

use axum::Router;
use axum_server::tls_rustls::RustlsConfig;

/// Loads a PEM certificate chain and its private key.
///
/// # Errors
/// A one-line reason naming the files.
pub async fn load(cert: &Path, key: &Path) -> Result<RustlsConfig, String> {
    // rustls is built with one cryptography provider (`ring`), which its
    // configuration builder then uses without being told.
    RustlsConfig::from_pem_file(cert, key).await.map_err(|e| {
        format!(
            "--tls-cert {} --tls-key {}: {e}",
            cert.display(),
            key.display()
        )
    })
}

/// Serves `router` over TLS on `listener` until `shutdown` resolves; open
/// requests get up to ten seconds to finish.
///
/// # Errors
/// The listener fails.
pub async fn serve(
    listener: tokio::net::TcpListener,
    config: RustlsConfig,
    router: Router,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    let listener = listener.into_std()?;
    let handle = axum_server::Handle::new();
    let stopper = handle.clone();
    tokio::spawn(async move {
        shutdown.await;
        stopper.graceful_shutdown(Some(Duration::from_secs(10)));
    });
    axum_server::from_tcp_rustls(listener, config)?
        .handle(handle)
        .serve(router.into_make_service())
        .await
}

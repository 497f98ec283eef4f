//! A short version of the documented load run (`cargo run --release
//! --example load`): readers and writers at once on loopback, no errors and
//! no lost pin.

use std::time::Duration;

use spreadscope::loadcheck::{LoadPlan, run};

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn concurrent_readers_and_writers_lose_nothing() {
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spreadscope::app::App::open(dir.path(), &spreadscope::api::ApiConfig::default())
        .await
        .expect("app");
    let session = app.service.sessions().await.expect("sessions").remove(0);
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
        .await
        .expect("bind");
    let addr = listener.local_addr().expect("addr");
    let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
    let server = tokio::spawn(spreadscope::app::serve(listener, app.router, async {
        let _ = stopped.await;
    }));
    let report = run(&LoadPlan {
        addr,
        edit_token: session.edit_token,
        readers: 10,
        writers: 4,
        duration: Duration::from_secs(2),
    })
    .await
    .expect("load run");
    let _ = stop.send(());
    server.await.expect("joins").expect("serves");
    assert_eq!(report.errors, 0, "{report:?}");
    assert_eq!(report.lost_pins, 0, "{report:?}");
    assert!(report.writes > 0 && report.reads > 0, "{report:?}");
}

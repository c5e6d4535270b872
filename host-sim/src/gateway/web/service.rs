//! The dashboard inside `envord gateway serve`: the `[web]` section of the
//! service's TOML configuration and the thread that serves the pages from
//! the service's store (its own connection), beside the MQTT loop.

use super::auth::Users;
use super::{clock, data, App, WebConfig};
use crate::error::CliError;
use crate::gateway::map::GatewayMap;
use std::net::SocketAddr;
use std::sync::Arc;
use std::time::Duration;

/// `[web]` of `gateway.toml`: serve the dashboard from the service.
#[derive(Clone, Debug, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ServiceWebConfig {
    /// Address to listen on (loopback by default; a TLS proxy in front for others).
    #[serde(default = "default_listen")]
    pub listen: String,
    /// Users file (TOML, see `envord gateway user add`).
    pub users: String,
    /// Gateway map (TOML) naming physical bearings.
    pub map: Option<String>,
    /// Mark the session cookie Secure (set this behind a TLS reverse proxy).
    #[serde(default)]
    pub secure_cookie: bool,
    /// A node is marked silent after this many minutes without a report.
    #[serde(default = "default_stale")]
    pub stale_after_min: u32,
    /// Seconds between background refreshes of the graded state (pages
    /// also refresh what arrived since, so this only keeps that small).
    #[serde(default = "default_refresh")]
    pub refresh_s: u64,
}

fn default_listen() -> String {
    "127.0.0.1:8470".into()
}
fn default_stale() -> u32 {
    180
}
fn default_refresh() -> u64 {
    5
}

/// Starts the dashboard when the service's configuration has a `[web]`
/// section (nothing otherwise): checks the section, binds the listener
/// (errors name the key), then folds the store and serves on its own
/// thread, so the MQTT loop starts without waiting for the first fold.
pub fn start_in_service(web: Option<&ServiceWebConfig>, store_url: &str) -> Result<(), CliError> {
    let Some(w) = web else {
        return Ok(());
    };
    let listen: SocketAddr = w.listen.parse().map_err(|e| {
        CliError::input(
            "web.listen",
            format!(
                "{:?} is not an address such as 127.0.0.1:8470: {e}",
                w.listen
            ),
        )
    })?;
    let users = Users::load(&w.users)?;
    if users.user.is_empty() {
        return Err(CliError::input(
            &w.users,
            "web.users: no users; add one with `envord gateway user add`",
        ));
    }
    let map = w.map.as_deref().map(GatewayMap::load).transpose()?;
    if w.refresh_s == 0 {
        return Err(CliError::input("web.refresh_s", "must be at least 1"));
    }
    let cfg = WebConfig {
        users,
        map,
        secure_cookie: w.secure_cookie,
        stale_after_ms: i64::from(w.stale_after_min) * 60_000,
        // the service's alarm evaluation records the state changes
        record_events: false,
    };
    if !listen.ip().is_loopback() {
        eprintln!("warning: web.listen {listen} is not loopback; put a TLS reverse proxy in front and set web.secure_cookie (docs/gateway.md)");
    }
    let store = data::StoreWeb::open(store_url)?;
    let listener = std::net::TcpListener::bind(listen)
        .map_err(|e| CliError::input("web.listen", format!("{listen}: {e}")))?;
    listener
        .set_nonblocking(true)
        .map_err(|e| CliError::Other(format!("web.listen: {e}")))?;
    let every = Duration::from_secs(w.refresh_s);
    std::thread::Builder::new()
        .name("web".into())
        .spawn(move || {
            if let Err(e) = run(cfg, Box::new(store), listener, listen, every) {
                eprintln!("gateway serve: the dashboard stopped: {e}");
            }
        })
        .map_err(|e| CliError::Other(format!("web thread: {e}")))?;
    Ok(())
}

/// Refreshes the dashboard's graded state every `every` on its own thread,
/// so that a page view only grades what arrived since the last tick (a
/// regrade costs about one `gateway status` of the nodes with new reports).
pub fn spawn_refresher(app: Arc<App>, every: Duration) -> Result<(), CliError> {
    std::thread::Builder::new()
        .name("web-refresh".into())
        .spawn(move || loop {
            std::thread::sleep(every);
            if let Err(e) = app.refresh(clock::now_ms()) {
                eprintln!("dashboard refresh: {e}");
            }
        })
        .map(|_| ())
        .map_err(|e| CliError::Other(format!("web refresh thread: {e}")))
}

fn run(
    cfg: WebConfig,
    store: Box<dyn data::WebStore>,
    listener: std::net::TcpListener,
    listen: SocketAddr,
    every: Duration,
) -> Result<(), CliError> {
    let t = std::time::Instant::now();
    let app = Arc::new(App::new(cfg, store)?);
    eprintln!(
        "envord plant view on http://{listen}/ (store folded in {:.1} s)",
        t.elapsed().as_secs_f64()
    );
    spawn_refresher(Arc::clone(&app), every)?;
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| CliError::Other(format!("runtime: {e}")))?;
    rt.block_on(async move {
        let listener = tokio::net::TcpListener::from_std(listener)
            .map_err(|e| CliError::Other(format!("web.listen: {e}")))?;
        super::serve_on(listener, app)
            .await
            .map_err(|e| CliError::Other(format!("server: {e}")))
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn section_defaults_and_unknown_keys() {
        let w: ServiceWebConfig = toml::from_str("users = \"u.toml\"").unwrap();
        assert_eq!(w.listen, "127.0.0.1:8470");
        assert_eq!(w.stale_after_min, 180);
        assert!(!w.secure_cookie);
        assert!(toml::from_str::<ServiceWebConfig>("users = \"u\"\nport = 1").is_err());
        let bad = ServiceWebConfig {
            listen: "localhost".into(),
            ..w
        };
        let e = start_in_service(Some(&bad), "x.db")
            .err()
            .map(|e| e.to_string());
        assert!(e.is_some_and(|m| m.contains("web.listen")));
        assert!(start_in_service(None, "x.db").is_ok());
    }
}

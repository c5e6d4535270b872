//! `envord gateway web`: the plant dashboard (fleet, bearing trends, alarm
//! events, nodes, exports) served from the gateway store behind a login;
//! `envord gateway user add`: the users file. See docs/gateway.md.
//!
//! Every page but `/health` needs a session (cookie `envord_sid`, HttpOnly,
//! SameSite=Strict, Secure with `--secure-cookie`); every form that changes
//! something carries the session's CSRF token; failed logins are limited per
//! client address and per user name. Nothing here sends downlinks.

pub mod auth;
pub mod chart;
pub mod clock;
pub mod data;
pub mod estimate;
pub mod pages;
pub mod service;
pub mod summary;

use crate::error::CliError;
use crate::gateway::map::{GatewayMap, SensorRef};
use auth::{RateLimit, Role, Session, Sessions, Users};
use axum::extract::{ConnectInfo, Path, State};
use axum::http::{header, HeaderMap, HeaderValue, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Form, Router};
use data::WebStore;
use std::net::SocketAddr;
use std::sync::{Arc, Mutex};

/// Arguments of `envord gateway web`.
#[derive(clap::Args, Debug)]
pub struct WebArgs {
    /// Gateway store: SQLite file (must exist) or postgres:// URL.
    #[arg(long, env = "ENVORD_DB")]
    db: String,
    /// Users file (TOML, see `envord gateway user add`).
    #[arg(long)]
    users: String,
    /// Address to listen on (loopback by default; put a TLS proxy in front for others).
    #[arg(long, default_value = "127.0.0.1:8470")]
    listen: SocketAddr,
    /// Gateway map (TOML) naming physical bearings.
    #[arg(long)]
    map: Option<String>,
    /// Mark the session cookie Secure (set this behind a TLS reverse proxy).
    #[arg(long)]
    secure_cookie: bool,
    /// A node is stale after this many minutes without a report.
    #[arg(long, default_value_t = 180)]
    stale_after_min: u32,
}

/// Arguments of `envord gateway user`.
#[derive(clap::Args, Debug)]
pub struct UserArgs {
    #[command(subcommand)]
    command: UserCommand,
}

#[derive(clap::Subcommand, Debug)]
enum UserCommand {
    /// Add a user (password read from the first line of standard input).
    Add(UserAddArgs),
    /// Print the Argon2 hash of a password read from standard input.
    Hash,
}

#[derive(clap::Args, Debug)]
struct UserAddArgs {
    /// Users file (created if missing).
    #[arg(long)]
    users: String,
    /// Login name.
    #[arg(long)]
    name: String,
    /// Role.
    #[arg(long, value_enum)]
    role: RoleArg,
    /// Replace an existing user of that name.
    #[arg(long)]
    replace: bool,
}

#[derive(Clone, Copy, Debug, clap::ValueEnum)]
enum RoleArg {
    Viewer,
    Operator,
}

fn read_password() -> Result<String, CliError> {
    let mut line = String::new();
    std::io::stdin()
        .read_line(&mut line)
        .map_err(|e| CliError::input("stdin", e))?;
    let p = line.trim_end_matches(['\r', '\n']).to_string();
    if p.is_empty() {
        return Err(CliError::input("stdin", "no password on the first line"));
    }
    Ok(p)
}

/// Runs `envord gateway user ...`.
pub fn user_cmd(a: &UserArgs) -> Result<(), CliError> {
    match &a.command {
        UserCommand::Add(u) => {
            let role = match u.role {
                RoleArg::Viewer => Role::Viewer,
                RoleArg::Operator => Role::Operator,
            };
            auth::add_user(&u.users, &u.name, role, &read_password()?, u.replace)?;
            println!("user {} ({}) written to {}", u.name, role.name(), u.users);
            Ok(())
        }
        UserCommand::Hash => {
            println!("{}", auth::hash_password(&read_password()?)?);
            Ok(())
        }
    }
}

/// Settings of the dashboard.
pub struct WebConfig {
    /// Users and roles.
    pub users: Users,
    /// Gateway map.
    pub map: Option<GatewayMap>,
    /// Session cookie gets `Secure`.
    pub secure_cookie: bool,
    /// A node is stale after this long without a report, ms.
    pub stale_after_ms: i64,
    /// Record the state changes as alarm events (the standalone dashboard);
    /// off under `gateway serve`, whose alarm evaluation records them.
    pub record_events: bool,
}

/// The store and the running summary, behind one lock.
pub struct Inner {
    /// The store.
    pub store: Box<dyn WebStore>,
    /// The summary.
    pub summary: summary::Summary,
}

/// The dashboard's shared state.
pub struct App {
    /// Settings.
    pub cfg: WebConfig,
    /// Store and summary.
    pub inner: Mutex<Inner>,
    sessions: Mutex<Sessions>,
    rate: Mutex<RateLimit>,
}

impl App {
    /// A dashboard over a store; folds the store once.
    pub fn new(cfg: WebConfig, mut store: Box<dyn WebStore>) -> Result<Self, CliError> {
        let names = cfg
            .map
            .iter()
            .flat_map(|m| m.bearing.iter())
            .flat_map(|b| {
                b.sensors
                    .iter()
                    .map(|s| ((s.node, s.bearing), b.name.clone()))
            })
            .collect();
        let mut summary = summary::Summary::new(names, cfg.record_events);
        summary
            .refresh(store.as_mut(), Some(clock::now_ms()))
            .map_err(|e| CliError::Other(e.to_string()))?;
        Ok(Self {
            cfg,
            inner: Mutex::new(Inner { store, summary }),
            sessions: Mutex::new(Sessions::default()),
            rate: Mutex::new(RateLimit::default()),
        })
    }

    fn lock_inner(&self) -> std::sync::MutexGuard<'_, Inner> {
        self.inner
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// Brings the summary up to date with the store (new reports folded,
    /// their nodes graded again), staleness judged at `now_ms`.
    pub fn refresh(&self, now_ms: i64) -> Result<summary::Refreshed, data::DataError> {
        let mut inner = self.lock_inner();
        let Inner { store, summary } = &mut *inner;
        summary.refresh(store.as_mut(), Some(now_ms))
    }

    /// Renders a page by path for a session (the router's handlers and the
    /// benchmark use this); None for an unknown path.
    pub fn render(
        &self,
        path: &str,
        query: &str,
        session: &Session,
    ) -> Result<Option<(&'static str, String)>, data::DataError> {
        let now = clock::now_ms();
        let mut inner = self.lock_inner();
        let Inner { store, summary } = &mut *inner;
        summary.refresh(store.as_mut(), Some(now))?;
        let parts: Vec<&str> = path.trim_matches('/').split('/').collect();
        let html = "text/html; charset=utf-8";
        Ok(match parts.as_slice() {
            [""] => {
                let q: pages::FleetQuery = serde_urlencoded_parse(query);
                let f = pages::fleet(&mut inner, &self.cfg, now)?;
                Some((html, pages::fleet_page(&f, &q, session, &self.cfg)))
            }
            ["bearing", n, b] => match (n.parse::<u16>(), b.parse::<u8>()) {
                (Ok(n), Ok(b)) => {
                    let (name, sensors) = pages::sensors_of(&self.cfg, n, b);
                    let d = pages::bearing_data(&mut inner, &sensors)?;
                    Some((
                        html,
                        pages::bearing_page(
                            name.as_deref(),
                            &d,
                            session,
                            &self.cfg,
                            SensorRef {
                                node: n,
                                bearing: b,
                            },
                        ),
                    ))
                }
                _ => None,
            },
            ["node", n] => match n.parse::<u16>() {
                Ok(n) => Some((
                    html,
                    pages::node_page(&mut inner, n, session, &self.cfg, now)?,
                )),
                Err(_) => None,
            },
            ["events"] => Some((
                html,
                pages::events_page(&mut inner, session, &self.cfg, now, None)?,
            )),
            ["export", "fleet.csv"] => Some((
                "text/csv; charset=utf-8",
                pages::fleet_csv(&pages::fleet(&mut inner, &self.cfg, now)?),
            )),
            ["export", "fleet.json"] => {
                let f = pages::fleet(&mut inner, &self.cfg, now)?;
                let v = serde_json::json!({"channels": f.channels, "physical": f.physical, "defects": f.states});
                Some(("application/json", v.to_string()))
            }
            ["export", file @ ("trend.csv" | "trend.json")] => {
                let q: TrendQuery = serde_urlencoded_parse(query);
                match (q.node, q.bearing) {
                    (Some(n), Some(b)) => {
                        let d = pages::bearing_data(
                            &mut inner,
                            &[SensorRef {
                                node: n,
                                bearing: b,
                            }],
                        )?;
                        match d.first() {
                            Some(d) if *file == "trend.csv" => {
                                Some(("text/csv; charset=utf-8", pages::trend_csv(d)))
                            }
                            Some(d) => Some((
                                "application/json",
                                serde_json::Value::Array(pages::trend_rows(d)).to_string(),
                            )),
                            None => None,
                        }
                    }
                    _ => None,
                }
            }
            _ => None,
        })
    }
}

#[derive(Default, serde::Deserialize)]
struct TrendQuery {
    node: Option<u16>,
    bearing: Option<u8>,
}

fn serde_urlencoded_parse<T: serde::de::DeserializeOwned + Default>(q: &str) -> T {
    axum::extract::Query::<T>::try_from_uri(&format!("/?{q}").parse().unwrap_or_default())
        .map(|x| x.0)
        .unwrap_or_default()
}

const SID: &str = "envord_sid";
const PRE: &str = "envord_pre";

fn cookie(headers: &HeaderMap, name: &str) -> Option<String> {
    headers
        .get_all(header::COOKIE)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(';'))
        .filter_map(|kv| kv.trim().split_once('='))
        .find(|(k, _)| *k == name)
        .map(|(_, v)| v.to_string())
}

fn set_cookie(app: &App, name: &str, value: &str, max_age: i64) -> HeaderValue {
    let secure = if app.cfg.secure_cookie {
        "; Secure"
    } else {
        ""
    };
    HeaderValue::from_str(&format!(
        "{name}={value}; Path=/; HttpOnly; SameSite=Strict; Max-Age={max_age}{secure}"
    ))
    .unwrap_or_else(|_| HeaderValue::from_static(""))
}

fn secure_headers(mut r: Response) -> Response {
    let h = r.headers_mut();
    h.insert(
        header::CONTENT_SECURITY_POLICY,
        HeaderValue::from_static("default-src 'none'; style-src 'unsafe-inline'; img-src 'self' data:; form-action 'self'; frame-ancestors 'none'; base-uri 'none'"),
    );
    h.insert(
        header::X_CONTENT_TYPE_OPTIONS,
        HeaderValue::from_static("nosniff"),
    );
    h.insert(
        header::REFERRER_POLICY,
        HeaderValue::from_static("no-referrer"),
    );
    h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    r
}

fn session_of(app: &App, headers: &HeaderMap) -> Option<Session> {
    let t = cookie(headers, SID)?;
    let mut s = app
        .sessions
        .lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner);
    s.get(&t, clock::now_ms())
}

/// The login page with a fresh pre-session token (double-submit cookie).
fn login_response(
    app: &App,
    headers: &HeaderMap,
    status: StatusCode,
    next: &str,
    error: Option<&str>,
) -> Response {
    // Keep the browser's token: a second tab or a favicon fetch must not
    // invalidate the form already shown.
    let pre = cookie(headers, PRE)
        .filter(|p| p.len() == 64 && p.bytes().all(|c| c.is_ascii_hexdigit()))
        .unwrap_or_else(auth::token);
    let mut r = (
        status,
        axum::response::Html(pages::login_page(&pre, next, error)),
    )
        .into_response();
    r.headers_mut()
        .append(header::SET_COOKIE, set_cookie(app, PRE, &pre, 900));
    secure_headers(r)
}

fn safe_next(n: &str) -> String {
    if n.starts_with('/') && !n.starts_with("//") && !n.contains('\\') && !n.starts_with("/login") {
        n.to_string()
    } else {
        "/".into()
    }
}

async fn page(State(app): State<Arc<App>>, uri: axum::http::Uri, headers: HeaderMap) -> Response {
    let Some(session) = session_of(&app, &headers) else {
        let next = uri
            .path_and_query()
            .map_or("/".to_string(), |p| p.as_str().to_string());
        return login_response(
            &app,
            &headers,
            StatusCode::UNAUTHORIZED,
            &safe_next(&next),
            None,
        );
    };
    // The store clients block (the PostgreSQL one runs its own runtime):
    // render off the async threads.
    let (app2, s2) = (app.clone(), session.clone());
    let (path, query) = (
        uri.path().to_string(),
        uri.query().unwrap_or("").to_string(),
    );
    let r = tokio::task::spawn_blocking(move || app2.render(&path, &query, &s2))
        .await
        .unwrap_or_else(|e| Err(data::DataError::Query(format!("page task: {e}"))));
    secure_headers(match r {
        Ok(Some((ct, body))) => ([(header::CONTENT_TYPE, ct)], body).into_response(),
        Ok(None) => (
            StatusCode::NOT_FOUND,
            axum::response::Html(pages::message_page(
                "Not found",
                Some(&session),
                "No such page.",
            )),
        )
            .into_response(),
        Err(e) => (
            StatusCode::INTERNAL_SERVER_ERROR,
            axum::response::Html(pages::message_page(
                "Store error",
                Some(&session),
                &e.to_string(),
            )),
        )
            .into_response(),
    })
}

async fn login_get(State(app): State<Arc<App>>, headers: HeaderMap) -> Response {
    if session_of(&app, &headers).is_some() {
        return secure_headers((StatusCode::SEE_OTHER, [(header::LOCATION, "/")]).into_response());
    }
    login_response(&app, &headers, StatusCode::OK, "/", None)
}

#[derive(serde::Deserialize)]
struct LoginForm {
    user: String,
    password: String,
    #[serde(default)]
    pre: String,
    #[serde(default)]
    next: String,
}

async fn login_post(
    State(app): State<Arc<App>>,
    ConnectInfo(addr): ConnectInfo<SocketAddr>,
    headers: HeaderMap,
    Form(f): Form<LoginForm>,
) -> Response {
    let now = clock::now_ms();
    let next = safe_next(&f.next);
    if f.pre.len() < 32 || cookie(&headers, PRE).as_deref() != Some(f.pre.as_str()) {
        return login_response(
            &app,
            &headers,
            StatusCode::FORBIDDEN,
            &next,
            Some("The sign-in form expired or was not sent by this page; try again."),
        );
    }
    let ip = format!("ip:{}", addr.ip());
    let name = format!("user:{}", f.user);
    let wait = app
        .rate
        .lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner)
        .blocked(&[&ip, &name], now);
    if let Some(w) = wait {
        return login_response(
            &app,
            &headers,
            StatusCode::TOO_MANY_REQUESTS,
            &next,
            Some(&format!("Too many failed sign-ins; wait {w} s.")),
        );
    }
    let app2 = app.clone();
    let (user, password) = (f.user.clone(), f.password.clone());
    let found =
        tokio::task::spawn_blocking(move || app2.cfg.users.check(&user, &password).cloned())
            .await
            .ok()
            .flatten();
    let Some(user) = found else {
        app.rate
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
            .fail(&[&ip, &name], now);
        return login_response(
            &app,
            &headers,
            StatusCode::UNAUTHORIZED,
            &next,
            Some("Wrong user or password."),
        );
    };
    let token = app
        .sessions
        .lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner)
        .start(&user, now);
    let Some(token) = token else {
        return login_response(
            &app,
            &headers,
            StatusCode::INTERNAL_SERVER_ERROR,
            &next,
            Some("No random source for a session."),
        );
    };
    let mut r = (StatusCode::SEE_OTHER, [(header::LOCATION, next)]).into_response();
    r.headers_mut().append(
        header::SET_COOKIE,
        set_cookie(&app, SID, &token, auth::SESSION_MS / 1000),
    );
    r.headers_mut()
        .append(header::SET_COOKIE, set_cookie(&app, PRE, "", 0));
    secure_headers(r)
}

#[derive(serde::Deserialize)]
struct CsrfForm {
    #[serde(default)]
    csrf: String,
}

fn refused(session: Option<&Session>, status: StatusCode, msg: &str) -> Response {
    secure_headers(
        (
            status,
            axum::response::Html(pages::message_page("Refused", session, msg)),
        )
            .into_response(),
    )
}

/// Constant-time comparison of two tokens.
fn same(a: &str, b: &str) -> bool {
    a.len() == b.len()
        && a.bytes()
            .zip(b.bytes())
            .fold(0u8, |acc, (x, y)| acc | (x ^ y))
            == 0
}

async fn logout(
    State(app): State<Arc<App>>,
    headers: HeaderMap,
    Form(f): Form<CsrfForm>,
) -> Response {
    let Some(s) = session_of(&app, &headers) else {
        return login_response(&app, &headers, StatusCode::UNAUTHORIZED, "/", None);
    };
    if !same(&f.csrf, &s.csrf) {
        return refused(
            Some(&s),
            StatusCode::FORBIDDEN,
            "Refused: the form's CSRF token is missing or wrong.",
        );
    }
    if let Some(t) = cookie(&headers, SID) {
        app.sessions
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
            .end(&t);
    }
    let mut r = (StatusCode::SEE_OTHER, [(header::LOCATION, "/login")]).into_response();
    r.headers_mut()
        .append(header::SET_COOKIE, set_cookie(&app, SID, "", 0));
    secure_headers(r)
}

async fn ack(
    State(app): State<Arc<App>>,
    Path(id): Path<i64>,
    headers: HeaderMap,
    Form(f): Form<CsrfForm>,
) -> Response {
    let Some(s) = session_of(&app, &headers) else {
        return login_response(&app, &headers, StatusCode::UNAUTHORIZED, "/events", None);
    };
    if !same(&f.csrf, &s.csrf) {
        return refused(
            Some(&s),
            StatusCode::FORBIDDEN,
            "Refused: the form's CSRF token is missing or wrong.",
        );
    }
    if s.role < Role::Operator {
        return refused(
            Some(&s),
            StatusCode::FORBIDDEN,
            "Refused: acknowledging needs the operator role.",
        );
    }
    let now = clock::now_ms();
    let app2 = app.clone();
    let body = tokio::task::spawn_blocking(move || {
        let mut inner = app2.lock_inner();
        let notice = match inner.store.ack_event(id, &s.user, now) {
            Ok(true) => format!("Event {id} acknowledged by {}.", s.user),
            Ok(false) => format!("Event {id} does not exist or was acknowledged already."),
            Err(e) => e.to_string(),
        };
        pages::events_page(&mut inner, &s, &app2.cfg, now, Some(&notice))
    })
    .await
    .unwrap_or_else(|e| Err(data::DataError::Query(format!("ack task: {e}"))));
    secure_headers(match body {
        Ok(b) => axum::response::Html(b).into_response(),
        Err(e) => (StatusCode::INTERNAL_SERVER_ERROR, e.to_string()).into_response(),
    })
}

async fn health() -> Response {
    secure_headers(
        (
            [(header::CONTENT_TYPE, "application/json")],
            "{\"status\":\"ok\"}",
        )
            .into_response(),
    )
}

/// The dashboard's routes.
pub fn router(app: Arc<App>) -> Router {
    Router::new()
        .route("/health", get(health))
        .route("/favicon.ico", get(|| async { StatusCode::NO_CONTENT }))
        .route("/login", get(login_get).post(login_post))
        .route("/logout", post(logout))
        .route("/events/{id}/ack", post(ack))
        .fallback(get(page))
        .with_state(app)
}

/// Serves the dashboard on an open listener until the task is dropped (the
/// MQTT service can run this beside its own loop).
pub async fn serve_on(listener: tokio::net::TcpListener, app: Arc<App>) -> std::io::Result<()> {
    axum::serve(
        listener,
        router(app).into_make_service_with_connect_info::<SocketAddr>(),
    )
    .await
}

/// Serves the dashboard at `listen` until interrupted (blocking).
pub fn serve(cfg: WebConfig, store: Box<dyn WebStore>, listen: SocketAddr) -> Result<(), CliError> {
    let app = Arc::new(App::new(cfg, store)?);
    service::spawn_refresher(Arc::clone(&app), std::time::Duration::from_secs(5))?;
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| CliError::Other(format!("runtime: {e}")))?;
    rt.block_on(async move {
        let listener = tokio::net::TcpListener::bind(listen)
            .await
            .map_err(|e| CliError::input("--listen", format!("{listen}: {e}")))?;
        let local = listener
            .local_addr()
            .map_err(|e| CliError::Other(e.to_string()))?;
        println!("envord plant view on http://{local}/ (Ctrl-C stops)");
        tokio::select! {
            r = serve_on(listener, app) => r.map_err(|e| CliError::Other(format!("server: {e}"))),
            _ = tokio::signal::ctrl_c() => Ok(()),
        }
    })
}

/// Runs `envord gateway web`.
pub fn web_cmd(a: &WebArgs) -> Result<(), CliError> {
    let users = Users::load(&a.users)?;
    if users.user.is_empty() {
        return Err(CliError::input(
            &a.users,
            "no users; add one with `envord gateway user add`",
        ));
    }
    let map = a.map.as_deref().map(GatewayMap::load).transpose()?;
    let cfg = WebConfig {
        users,
        map,
        secure_cookie: a.secure_cookie,
        stale_after_ms: i64::from(a.stale_after_min) * 60_000,
        record_events: true,
    };
    if !a.listen.ip().is_loopback() {
        eprintln!("warning: listening on {} (not loopback); put a TLS reverse proxy in front and pass --secure-cookie (docs/gateway.md)", a.listen);
    }
    let store = data::StoreWeb::open(&a.db)?;
    serve(cfg, Box::new(store), a.listen)
}

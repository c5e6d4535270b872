//! Users, roles, password hashes (Argon2id, PHC strings), sessions, CSRF
//! tokens and the login rate limit.
//!
//! ```toml
//! [[user]]
//! name = "lena"
//! role = "operator"   # or "viewer"
//! hash = "$argon2id$v=19$m=19456,t=2,p=1$..."
//! ```

use crate::error::CliError;
use argon2::password_hash::{PasswordHash, PasswordHasher, PasswordVerifier, SaltString};
use argon2::Argon2;
use std::collections::HashMap;

/// What a user may do.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, serde::Deserialize, serde::Serialize,
)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// Reads every page and export.
    Viewer,
    /// Also acknowledges alarm events.
    Operator,
}

impl Role {
    /// Lower-case name.
    pub fn name(self) -> &'static str {
        match self {
            Role::Viewer => "viewer",
            Role::Operator => "operator",
        }
    }
}

/// One user of the users file.
#[derive(Clone, Debug, serde::Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct User {
    /// Login name.
    pub name: String,
    /// Role.
    pub role: Role,
    /// Argon2 PHC hash of the password.
    pub hash: String,
}

/// The users file.
#[derive(Clone, Debug, Default, serde::Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct Users {
    /// Users.
    #[serde(default)]
    pub user: Vec<User>,
}

fn valid_name(n: &str) -> bool {
    !n.is_empty()
        && n.len() <= 64
        && n.bytes()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, b'.' | b'_' | b'-'))
}

impl Users {
    /// Parses and checks a users file's text; `source` names it in errors.
    pub fn parse(source: &str, text: &str) -> Result<Self, CliError> {
        let u: Users = toml::from_str(text).map_err(|e| CliError::input(source, e))?;
        for (i, x) in u.user.iter().enumerate() {
            if !valid_name(&x.name) {
                return Err(CliError::input(
                    source,
                    format!(
                        "user[{i}]: name {:?} must be 1-64 of A-Z a-z 0-9 . _ -",
                        x.name
                    ),
                ));
            }
            if PasswordHash::new(&x.hash).is_err() {
                return Err(CliError::input(
                    source,
                    format!(
                        "user[{i}] {:?}: hash is not a PHC string (make one with `envord gateway user add`)",
                        x.name
                    ),
                ));
            }
            if u.user.iter().take(i).any(|o| o.name == x.name) {
                return Err(CliError::input(
                    source,
                    format!("user[{i}]: duplicate name {:?}", x.name),
                ));
            }
        }
        Ok(u)
    }

    /// Reads a users file.
    pub fn load(path: &str) -> Result<Self, CliError> {
        let text = std::fs::read_to_string(path).map_err(|e| CliError::input(path, e))?;
        Self::parse(path, &text)
    }

    /// The user with this name and password, if both match. The hash is
    /// checked even for an unknown name so that timing does not tell names.
    pub fn check(&self, name: &str, password: &str) -> Option<&User> {
        let user = self.user.iter().find(|u| u.name == name);
        let hash = user.map_or(DUMMY_HASH, |u| u.hash.as_str());
        let ok = PasswordHash::new(hash).ok().is_some_and(|h| {
            Argon2::default()
                .verify_password(password.as_bytes(), &h)
                .is_ok()
        });
        user.filter(|_| ok)
    }
}

/// A valid hash of a random password, for unknown names.
const DUMMY_HASH: &str =
    "$argon2id$v=19$m=19456,t=2,p=1$ZW52b3JkZHVtbXlzYWx0$Zr9yNOqrrq1c7W3mhtgUdz5bJq9hcmCSKnTi8QhuFbM";

/// Hashes a password with Argon2id (the crate's defaults) and a random salt.
pub fn hash_password(password: &str) -> Result<String, CliError> {
    let mut salt = [0u8; 16];
    getrandom::fill(&mut salt).map_err(|e| CliError::Other(format!("random source: {e}")))?;
    let salt = SaltString::encode_b64(&salt).map_err(|e| CliError::Other(format!("salt: {e}")))?;
    Argon2::default()
        .hash_password(password.as_bytes(), &salt)
        .map(|h| h.to_string())
        .map_err(|e| CliError::Other(format!("hashing: {e}")))
}

/// Adds (or with `replace` replaces) a user in the users file at `path`,
/// creating it if missing.
pub fn add_user(
    path: &str,
    name: &str,
    role: Role,
    password: &str,
    replace: bool,
) -> Result<(), CliError> {
    if !valid_name(name) {
        return Err(CliError::input(
            "--name",
            "must be 1-64 of A-Z a-z 0-9 . _ -",
        ));
    }
    if password.chars().count() < 10 {
        return Err(CliError::input("password", "at least 10 characters"));
    }
    let mut users = match std::fs::read_to_string(path) {
        Ok(t) => Users::parse(path, &t)?,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Users::default(),
        Err(e) => return Err(CliError::input(path, e)),
    };
    let hash = hash_password(password)?;
    match users.user.iter_mut().find(|u| u.name == name) {
        Some(_) if !replace => {
            return Err(CliError::input(
                path,
                format!("user {name:?} exists; pass --replace to set a new password or role"),
            ))
        }
        Some(u) => {
            u.role = role;
            u.hash = hash;
        }
        None => users.user.push(User {
            name: name.into(),
            role,
            hash,
        }),
    }
    let text = toml::to_string(&users).map_err(|e| CliError::Other(format!("{path}: {e}")))?;
    // Write beside, then rename: an interrupted write leaves the old file.
    let tmp = format!("{path}.tmp");
    std::fs::write(&tmp, text).map_err(|e| CliError::Other(format!("{tmp}: {e}")))?;
    std::fs::rename(&tmp, path).map_err(|e| CliError::Other(format!("{path}: {e}")))?;
    Ok(())
}

/// A random token (hex of 32 bytes from the operating system).
pub fn token() -> String {
    let mut b = [0u8; 32];
    // A failing random source leaves zeros: refuse such a token by length.
    if getrandom::fill(&mut b).is_err() {
        return String::new();
    }
    b.iter().map(|x| format!("{x:02x}")).collect()
}

/// One logged-in session.
#[derive(Clone, Debug)]
pub struct Session {
    /// User name.
    pub user: String,
    /// Role.
    pub role: Role,
    /// CSRF token of this session's forms.
    pub csrf: String,
    /// Expiry, Unix ms.
    pub expires_ms: i64,
}

/// How long a session lives without use.
pub const SESSION_MS: i64 = 8 * 3_600_000;

/// Sessions by cookie token.
#[derive(Default)]
pub struct Sessions {
    map: HashMap<String, Session>,
}

impl Sessions {
    /// Starts a session; returns its cookie token, or None without randomness.
    pub fn start(&mut self, user: &User, now_ms: i64) -> Option<String> {
        let (t, csrf) = (token(), token());
        if t.is_empty() || csrf.is_empty() {
            return None;
        }
        self.map.retain(|_, s| s.expires_ms > now_ms);
        self.map.insert(
            t.clone(),
            Session {
                user: user.name.clone(),
                role: user.role,
                csrf,
                expires_ms: now_ms + SESSION_MS,
            },
        );
        Some(t)
    }

    /// The live session of a token, its expiry pushed on.
    pub fn get(&mut self, token: &str, now_ms: i64) -> Option<Session> {
        let s = self.map.get_mut(token)?;
        if s.expires_ms <= now_ms {
            self.map.remove(token);
            return None;
        }
        s.expires_ms = now_ms + SESSION_MS;
        Some(s.clone())
    }

    /// Ends a session.
    pub fn end(&mut self, token: &str) {
        self.map.remove(token);
    }
}

/// Failed logins allowed per key within [`WINDOW_MS`].
pub const MAX_FAILURES: usize = 5;
/// The rate limit's window.
pub const WINDOW_MS: i64 = 5 * 60_000;

/// Failed login attempts per key (the client address and the user name are
/// both keys: a proxy in front hides addresses, the name still counts).
#[derive(Default)]
pub struct RateLimit {
    failures: HashMap<String, Vec<i64>>,
}

impl RateLimit {
    /// Seconds to wait if any of `keys` is over the limit.
    pub fn blocked(&mut self, keys: &[&str], now_ms: i64) -> Option<i64> {
        let mut wait = None;
        for k in keys {
            if let Some(v) = self.failures.get_mut(*k) {
                v.retain(|t| now_ms - t < WINDOW_MS);
                if v.len() >= MAX_FAILURES {
                    let oldest = v.iter().min().copied().unwrap_or(now_ms);
                    let w = (oldest + WINDOW_MS - now_ms) / 1000 + 1;
                    wait = Some(wait.map_or(w, |x: i64| x.max(w)));
                }
            }
        }
        wait
    }

    /// Counts a failure against each key.
    pub fn fail(&mut self, keys: &[&str], now_ms: i64) {
        if self.failures.len() > 10_000 {
            self.failures
                .retain(|_, v| v.iter().any(|t| now_ms - t < WINDOW_MS));
        }
        for k in keys {
            self.failures
                .entry((*k).to_string())
                .or_default()
                .push(now_ms);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hash_verifies_and_wrong_password_fails() {
        let h = hash_password("correct horse battery").unwrap();
        assert!(h.starts_with("$argon2id$"));
        let users = Users {
            user: vec![User {
                name: "lena".into(),
                role: Role::Viewer,
                hash: h,
            }],
        };
        assert!(users.check("lena", "correct horse battery").is_some());
        assert!(users.check("lena", "wrong horse battery").is_none());
        assert!(users.check("nobody", "correct horse battery").is_none());
        assert!(PasswordHash::new(DUMMY_HASH).is_ok());
    }

    #[test]
    fn rate_limit_blocks_after_failures_then_frees() {
        let mut r = RateLimit::default();
        for i in 0..MAX_FAILURES {
            assert!(r.blocked(&["ip", "lena"], i as i64).is_none());
            r.fail(&["ip", "lena"], i as i64);
        }
        assert!(r.blocked(&["other-ip", "lena"], 10).is_some());
        assert!(r.blocked(&["ip", "lena"], WINDOW_MS + 10).is_none());
    }

    #[test]
    fn bad_users_file_names_the_entry() {
        let e = Users::parse(
            "u.toml",
            "[[user]]\nname = \"a b\"\nrole = \"viewer\"\nhash = \"x\"\n",
        )
        .unwrap_err();
        assert!(e.to_string().contains("user[0]"), "{e}");
    }
}

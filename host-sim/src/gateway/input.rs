//! Reading frames from text lines (hex or base64, optionally preceded by a
//! receive time) or from raw binary files of concatenated frames.

use crate::error::CliError;
use std::io::Read;

/// How payloads are written in the input.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum InputFormat {
    /// Per line: hex if the token is all hex digits of even length, else base64.
    Auto,
    /// One hex payload per line.
    Hex,
    /// One base64 payload per line.
    Base64,
    /// A raw binary file of concatenated frames.
    Binary,
}

/// One payload read from the input, with where it came from.
#[derive(Clone, Debug)]
pub struct InputItem {
    /// File name or "-" for stdin.
    pub source: String,
    /// 1-based line number (text) or frame index (binary).
    pub line: usize,
    /// Receive time token when the line had two tokens.
    pub rx_time: Option<String>,
    /// The text of the payload as given (hex for binary input).
    pub text: String,
    /// Payload bytes, or why they could not be read.
    pub bytes: Result<Vec<u8>, String>,
}

/// A payload token that is not valid hex or base64. Its text is the reject
/// reason the store keeps.
#[derive(Clone, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum PayloadError {
    /// A hex pair with a non-hex digit (the pair as given).
    HexDigits(String),
    /// Hex text that is not ASCII.
    NotAscii,
    /// Hex text of odd length (the length).
    OddHex(usize),
    /// A character outside both base64 alphabets.
    Base64Char(char),
    /// Base64 of an impossible length or with non-zero padding bits.
    Base64Length,
}

impl std::fmt::Display for PayloadError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::HexDigits(t) => write!(f, "bad hex digits {t:?}"),
            Self::NotAscii => f.write_str("not ASCII"),
            Self::OddHex(n) => write!(f, "odd number of hex digits ({n})"),
            Self::Base64Char(c) => write!(f, "bad base64 character {c:?}"),
            Self::Base64Length => f.write_str("base64 length or padding bits invalid"),
        }
    }
}

impl std::error::Error for PayloadError {}

/// Decodes hex (upper or lower case, even length), through the `hex` crate.
pub fn parse_hex(s: &str) -> Result<Vec<u8>, PayloadError> {
    hex::decode(s).map_err(|e| match e {
        hex::FromHexError::InvalidHexCharacter { index, .. } => {
            // name the pair of digits the bad one belongs to
            let at = index - index % 2;
            match s.as_bytes().get(at..at + 2).map(std::str::from_utf8) {
                Some(Ok(t)) => PayloadError::HexDigits(t.to_string()),
                _ => PayloadError::NotAscii,
            }
        }
        _ => PayloadError::OddHex(s.len()),
    })
}

fn b64_char_ok(c: u8) -> bool {
    c.is_ascii_alphanumeric() || matches!(c, b'+' | b'-' | b'/' | b'_')
}

/// Decodes base64 (RFC 4648, standard or URL alphabet, padding optional),
/// through the `base64` crate: the padding is dropped, the URL alphabet's
/// two characters mapped to the standard's, and the rest decoded with
/// padding absent and the leftover bits required to be zero (RFC 4648).
pub fn parse_base64(s: &str) -> Result<Vec<u8>, PayloadError> {
    use base64::engine::{DecodePaddingMode, GeneralPurpose, GeneralPurposeConfig};
    use base64::Engine as _;
    const ENGINE: GeneralPurpose = GeneralPurpose::new(
        &base64::alphabet::STANDARD,
        GeneralPurposeConfig::new()
            .with_decode_padding_mode(DecodePaddingMode::RequireNone)
            .with_decode_allow_trailing_bits(false),
    );
    let body = s.trim_end_matches('=');
    if let Some(c) = body.bytes().find(|c| !b64_char_ok(*c)) {
        return Err(PayloadError::Base64Char(char::from(c)));
    }
    let std: Vec<u8> = body
        .bytes()
        .map(|c| match c {
            b'-' => b'+',
            b'_' => b'/',
            c => c,
        })
        .collect();
    ENGINE.decode(std).map_err(|_| PayloadError::Base64Length)
}

/// Encodes base64 (standard alphabet, padded); used by tests and vectors.
pub fn to_base64(b: &[u8]) -> String {
    const A: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut s = String::new();
    for chunk in b.chunks(3) {
        let n = chunk
            .iter()
            .enumerate()
            .fold(0u32, |acc, (i, &x)| acc | u32::from(x) << (16 - 8 * i));
        for i in 0..=chunk.len() {
            let idx = usize::try_from((n >> (18 - 6 * i)) & 63).unwrap_or(0);
            s.push(char::from(A.get(idx).copied().unwrap_or(b'A')));
        }
        for _ in chunk.len()..3 {
            s.push('=');
        }
    }
    s
}

/// Hex text of bytes.
pub fn to_hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

fn parse_token(tok: &str, fmt: InputFormat) -> Result<Vec<u8>, PayloadError> {
    match fmt {
        InputFormat::Hex => parse_hex(tok),
        InputFormat::Base64 => parse_base64(tok),
        _ => {
            if tok.len() % 2 == 0 && tok.bytes().all(|c| c.is_ascii_hexdigit()) {
                parse_hex(tok)
            } else {
                parse_base64(tok)
            }
        }
    }
}

/// Items of a text input: one payload per line, `[RX_TIME] PAYLOAD`; blank
/// lines and lines starting with `#` are skipped.
pub fn parse_text(source: &str, text: &str, fmt: InputFormat) -> Vec<InputItem> {
    let mut items = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let line = raw.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let toks: Vec<&str> = line.split_whitespace().collect();
        let (rx_time, tok, bytes) = match toks.as_slice() {
            [p] => (None, *p, parse_token(p, fmt).map_err(|e| e.to_string())),
            [t, p] => (
                Some((*t).to_string()),
                *p,
                parse_token(p, fmt).map_err(|e| e.to_string()),
            ),
            _ => (
                None,
                line,
                Err(format!(
                    "expected `[RX_TIME] PAYLOAD`, got {} fields",
                    toks.len()
                )),
            ),
        };
        items.push(InputItem {
            source: source.to_string(),
            line: i + 1,
            rx_time,
            text: tok.to_string(),
            bytes,
        });
    }
    items
}

/// Splits a binary file of concatenated frames using the lengths their
/// headers imply. An unknown header stops the split: the rest of the file
/// becomes one item that the decoder will reject (nothing is dropped).
pub fn split_binary(source: &str, data: &[u8]) -> Vec<InputItem> {
    let mut items = Vec::new();
    let mut rest = data;
    let mut index = 1;
    while !rest.is_empty() {
        // v1 and v2 report frames, v1 status frames (wire::frame::frame_len).
        let len = wire::frame::frame_len(rest);
        let take = len.unwrap_or(rest.len()).min(rest.len());
        let (frame, tail) = rest.split_at(take);
        items.push(InputItem {
            source: source.to_string(),
            line: index,
            rx_time: None,
            text: to_hex(frame),
            bytes: Ok(frame.to_vec()),
        });
        rest = tail;
        index += 1;
    }
    items
}

/// Reads every input (`-` or no file means stdin).
pub fn read_inputs(files: &[String], fmt: InputFormat) -> Result<Vec<InputItem>, CliError> {
    let names: Vec<String> = if files.is_empty() {
        vec!["-".to_string()]
    } else {
        files.to_vec()
    };
    let mut items = Vec::new();
    for name in names {
        let mut data = Vec::new();
        if name == "-" {
            std::io::stdin()
                .read_to_end(&mut data)
                .map_err(|e| CliError::input("stdin", e))?;
        } else {
            data = std::fs::read(&name).map_err(|e| CliError::input(&name, e))?;
        }
        if fmt == InputFormat::Binary {
            items.extend(split_binary(&name, &data));
        } else {
            let text = String::from_utf8(data).map_err(|e| {
                CliError::input(&name, format!("not UTF-8 text ({e}); use --format binary"))
            })?;
            items.extend(parse_text(&name, &text, fmt));
        }
    }
    Ok(items)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn base64_rfc4648_vectors() {
        // RFC 4648 section 10 test vectors.
        for (plain, enc) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(to_base64(plain.as_bytes()), enc);
            assert_eq!(parse_base64(enc).unwrap(), plain.as_bytes());
        }
        assert_eq!(
            parse_base64("Zm9v!").unwrap_err().to_string(),
            "bad base64 character '!'"
        );
        assert_eq!(
            parse_base64("Z").unwrap_err().to_string(),
            "base64 length or padding bits invalid"
        );
        // leftover bits must be zero (RFC 4648 section 3.5)
        assert!(parse_base64("Zh==").is_err());
        // URL alphabet, padding optional
        assert_eq!(parse_base64("-_8").unwrap(), parse_base64("+/8=").unwrap());
    }

    #[test]
    fn hex_and_lines() {
        assert_eq!(parse_hex("0aFF").unwrap(), vec![0x0a, 0xff]);
        assert_eq!(
            parse_hex("abc").unwrap_err().to_string(),
            "odd number of hex digits (3)"
        );
        assert_eq!(
            parse_hex("0aZ1").unwrap_err().to_string(),
            "bad hex digits \"Z1\""
        );
        let items = parse_text(
            "x",
            "# c\n\n0a0b\n2026-01-01T00:00:00Z Cgs=\na b c\n",
            InputFormat::Auto,
        );
        assert_eq!(items.len(), 3);
        assert_eq!(items[0].line, 3);
        assert_eq!(items[1].bytes.as_ref().unwrap(), &vec![0x0a, 0x0b]);
        assert_eq!(items[1].rx_time.as_deref(), Some("2026-01-01T00:00:00Z"));
        assert!(items[2].bytes.is_err());
    }
}

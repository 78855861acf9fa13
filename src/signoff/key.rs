//! Signatures with an SSH key: the signed message, signing with an OpenSSH private key file,
//! checking a signature, and OpenSSH allowed-signers files. The cryptography and the sshsig
//! format are the `ssh-key` crate's; this module only decides what is signed and who may sign.

use ssh_key::{HashAlg, LineEnding, PrivateKey, PublicKey, SshSig};

/// The sshsig namespace of every benchrec signature.
pub const NAMESPACE: &str = "benchrec";

/// The exact bytes signed (FORMAT.md, "Sign-off with a key").
pub fn message(record: &str, digest: &str, by: &str, on: &str) -> String {
    format!("record: {record}\ndigest: {digest}\nby: {by}\non: {on}\n")
}

/// Signs `msg` with the OpenSSH private key in `pem` (the key file's text). Returns the key's
/// fingerprint (`SHA256:…`) and the armored signature.
pub fn sign(pem: &str, msg: &str) -> Result<(String, String), String> {
    let key = PrivateKey::from_openssh(pem)
        .map_err(|e| format!("not an OpenSSH private key file ({e})"))?;
    if key.is_encrypted() {
        return Err("the key is protected by a passphrase; benchrec reads only unencrypted keys (make a signing key without a passphrase, or decrypt a copy with `ssh-keygen -p`)".into());
    }
    if key.algorithm() != ssh_key::Algorithm::Ed25519 {
        return Err(format!(
            "the key is {}; benchrec signs with ed25519 keys only (`ssh-keygen -t ed25519`)",
            key.algorithm()
        ));
    }
    let sig = key
        .sign(NAMESPACE, HashAlg::Sha512, msg.as_bytes())
        .map_err(|e| format!("signing failed: {e}"))?;
    let armored = sig
        .to_pem(LineEnding::LF)
        .map_err(|e| format!("signing failed: {e}"))?;
    Ok((fingerprint(&key.public_key().clone()), armored))
}

fn fingerprint(key: &PublicKey) -> String {
    key.fingerprint(HashAlg::Sha256).to_string()
}

/// Checks an armored signature over `msg`; returns the signing public key when it is good.
/// `claimed` is the fingerprint recorded beside it, which must name the same key.
pub fn check(armored: &str, claimed: Option<&str>, msg: &str) -> Result<PublicKey, String> {
    let sig = SshSig::from_pem(armored.trim().as_bytes())
        .map_err(|e| format!("the signature is not an SSH signature ({e})"))?;
    if sig.namespace() != NAMESPACE {
        return Err(format!(
            "the signature was made for `{}`, not for benchrec",
            sig.namespace()
        ));
    }
    let key = PublicKey::from(sig.public_key().clone());
    key.verify(NAMESPACE, msg.as_bytes(), &sig).map_err(|_| {
        "the signature does not match the record id, digest, name and date".to_string()
    })?;
    let fp = fingerprint(&key);
    match claimed {
        Some(c) if c.trim() == fp => Ok(key),
        Some(c) => Err(format!(
            "the signature was made with key {fp}, but the sign-off names key {}",
            c.trim()
        )),
        None => Err(format!(
            "the sign-off carries a signature (key {fp}) but no `key`"
        )),
    }
}

pub fn key_fingerprint(key: &PublicKey) -> String {
    fingerprint(key)
}

/// One line of an OpenSSH allowed-signers file.
#[derive(Debug, Clone)]
struct Allowed {
    principals: Vec<String>,
    namespaces: Option<Vec<String>>,
    cert_authority: bool,
    valid_after: Option<String>,
    valid_before: Option<String>,
    key: PublicKey,
}

/// An allowed-signers file (`ssh-keygen`(1), "ALLOWED SIGNERS"): which keys may sign for which
/// names.
#[derive(Debug, Clone, Default)]
pub struct Signers {
    lines: Vec<Allowed>,
}

/// Splits at unquoted blanks (`"` quotes, as the file format has them).
fn fields(line: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    for c in line.chars() {
        match c {
            '"' => {
                quoted = !quoted;
                cur.push(c);
            }
            ' ' | '\t' if !quoted => {
                if !cur.is_empty() {
                    out.push(std::mem::take(&mut cur));
                }
            }
            _ => cur.push(c),
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    out
}

fn unquote(s: &str) -> &str {
    s.strip_prefix('"')
        .and_then(|s| s.strip_suffix('"'))
        .unwrap_or(s)
}

/// Comma-separated list, commas inside quotes kept.
fn split_options(s: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    for c in s.chars() {
        match c {
            '"' => {
                quoted = !quoted;
                cur.push(c);
            }
            ',' if !quoted => out.push(std::mem::take(&mut cur)),
            _ => cur.push(c),
        }
    }
    out.push(cur);
    out
}

fn is_key_type(s: &str) -> bool {
    s.starts_with("ssh-") || s.starts_with("ecdsa-") || s.starts_with("sk-")
}

impl Signers {
    /// Parses the file's text; an error names the line (from 1) and what is wrong.
    pub fn parse(text: &str) -> Result<Self, (usize, String)> {
        let mut lines = Vec::new();
        for (n, raw) in text.lines().enumerate() {
            let line = raw.trim();
            if line.is_empty() || line.starts_with('#') {
                continue;
            }
            let err = |m: &str| (n + 1, m.to_string());
            let f = fields(line);
            let principals: Vec<String> = unquote(&f[0]).split(',').map(str::to_string).collect();
            let (opts, at) = match f.get(1) {
                Some(t) if is_key_type(t) => (None, 1),
                Some(o) => (Some(o.clone()), 2),
                None => return Err(err("a principal without a key")),
            };
            let (Some(kt), Some(b64)) = (f.get(at), f.get(at + 1)) else {
                return Err(err("expected `principals [options] key-type base64-key`"));
            };
            let key = PublicKey::from_openssh(&format!("{kt} {b64}"))
                .map_err(|e| err(&format!("the key does not parse ({e})")))?;
            let mut a = Allowed {
                principals,
                namespaces: None,
                cert_authority: false,
                valid_after: None,
                valid_before: None,
                key,
            };
            for o in opts.iter().flat_map(|o| split_options(o)) {
                let (name, value) = match o.split_once('=') {
                    Some((k, v)) => (k.to_ascii_lowercase(), Some(unquote(v).to_string())),
                    None => (o.to_ascii_lowercase(), None),
                };
                match (name.as_str(), value) {
                    ("cert-authority", None) => a.cert_authority = true,
                    ("namespaces", Some(v)) => {
                        a.namespaces = Some(v.split(',').map(str::to_string).collect())
                    }
                    ("valid-after", Some(v)) => a.valid_after = Some(v),
                    ("valid-before", Some(v)) => a.valid_before = Some(v),
                    _ => return Err(err(&format!("unknown option `{o}`"))),
                }
            }
            lines.push(a);
        }
        Ok(Signers { lines })
    }

    /// Whether `key` may sign benchrec records for `principal` at time `on` (the sign-off's
    /// ISO 8601 time; validity windows are compared with it).
    pub fn allows(&self, principal: &str, key: &PublicKey, on: &str) -> bool {
        let when = compact_time(on);
        self.lines.iter().any(|a| {
            !a.cert_authority
                && a.key.key_data() == key.key_data()
                && pattern_list_matches(&a.principals, principal)
                && a.namespaces
                    .as_ref()
                    .is_none_or(|ns| pattern_list_matches(ns, NAMESPACE))
                && a.valid_after
                    .as_ref()
                    .is_none_or(|t| when.as_ref().is_some_and(|w| w.as_str() >= pad(t).as_str()))
                && a.valid_before
                    .as_ref()
                    .is_none_or(|t| when.as_ref().is_some_and(|w| w.as_str() < pad(t).as_str()))
        })
    }
}

/// `YYYYMMDD[HHMM[SS]][Z]` padded to 14 digits, for comparison.
fn pad(t: &str) -> String {
    let digits: String = t.chars().filter(char::is_ascii_digit).collect();
    format!("{digits:0<14}")
}

/// An ISO 8601 time as 14 digits (UTC when it carries an offset).
fn compact_time(on: &str) -> Option<String> {
    let t = super::parse_time(on)?;
    Some(t.format("%Y%m%d%H%M%S").to_string())
}

/// OpenSSH pattern lists: `*` and `?` wildcards, `!` negates; a negated match refuses.
fn pattern_list_matches(patterns: &[String], name: &str) -> bool {
    let mut yes = false;
    for p in patterns {
        let p = p.trim();
        if let Some(neg) = p.strip_prefix('!') {
            if glob(neg.as_bytes(), name.as_bytes()) {
                return false;
            }
        } else if glob(p.as_bytes(), name.as_bytes()) {
            yes = true;
        }
    }
    yes
}

/// `*`/`?` wildcard match, backtracking only to the last `*` (linear in practice).
fn glob(p: &[u8], s: &[u8]) -> bool {
    let (mut i, mut j) = (0, 0);
    let mut star: Option<(usize, usize)> = None;
    while j < s.len() {
        if i < p.len() && (p[i] == b'?' || p[i] == s[j]) {
            i += 1;
            j += 1;
        } else if i < p.len() && p[i] == b'*' {
            star = Some((i, j));
            i += 1;
        } else if let Some((si, sj)) = star {
            i = si + 1;
            j = sj + 1;
            star = Some((si, sj + 1));
        } else {
            return false;
        }
    }
    p[i..].iter().all(|&c| c == b'*')
}

#[cfg(test)]
mod tests {
    use super::*;

    // Patterns as ssh_config(5), "PATTERNS" describes them (common practice in OpenSSH files).
    #[test]
    fn pattern_lists() {
        let l = |v: &[&str]| v.iter().map(|s| s.to_string()).collect::<Vec<_>>();
        assert!(pattern_list_matches(
            &l(&["*@lab.example"]),
            "ana@lab.example"
        ));
        assert!(!pattern_list_matches(
            &l(&["*@lab.example", "!ana@*"]),
            "ana@lab.example"
        ));
        assert!(pattern_list_matches(&l(&["a?a"]), "ana"));
        assert!(!pattern_list_matches(&l(&["ana"]), "anab"));
    }

    #[test]
    fn time_padding() {
        assert_eq!(pad("20260101"), "20260101000000");
        assert_eq!(pad("202601011230Z"), "20260101123000");
    }
}

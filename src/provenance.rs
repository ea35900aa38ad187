//! Provenance: sha256 digests of inputs and of the canonical results, and the manifest of outputs.
//!
//! The study digest is sha256 over the canonical (compact, key order fixed by the result types)
//! serialisation of results.json with the `digest` and `target` fields blank: the target names the
//! platform, which must not change a study's identity.

use sha2::{Digest, Sha256};

/// Lower-case hex sha256 of bytes.
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// A writer that passes bytes on and hashes them (sha256) on the way, for files written as streams.
pub struct HashingWriter<W: std::io::Write> {
    inner: W,
    hasher: Sha256,
}

impl<W: std::io::Write> HashingWriter<W> {
    pub fn new(inner: W) -> Self {
        HashingWriter { inner, hasher: Sha256::new() }
    }
    /// Flush and return the inner writer with the lower-case hex sha256 of everything written.
    pub fn finish(mut self) -> std::io::Result<(W, String)> {
        self.inner.flush()?;
        Ok((self.inner, hex(&self.hasher.finalize())))
    }
}

impl<W: std::io::Write> std::io::Write for HashingWriter<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let k = self.inner.write(buf)?;
        self.hasher.update(&buf[..k]);
        Ok(k)
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

fn hex(d: &[u8]) -> String {
    let mut s = String::with_capacity(64);
    for b in d {
        s.push_str(&format!("{b:02x}"));
    }
    s
}

/// The tool version recorded in every result.
pub fn version() -> &'static str {
    env!("CARGO_PKG_VERSION")
}

/// The platform the tool was built for (recorded, not hashed).
pub fn target() -> String {
    format!("{}-{}", std::env::consts::ARCH, std::env::consts::OS)
}

/// A `sha256sum -c` manifest: `<hex>  <name>` per line, names in the given order.
pub fn manifest(files: &[(&str, String)]) -> String {
    let mut out = String::new();
    for (name, hex) in files {
        out.push_str(hex);
        out.push_str("  ");
        out.push_str(name);
        out.push('\n');
    }
    out
}

/// Parse a manifest back into (name, hex) pairs; malformed lines are returned as errors with their number.
pub fn parse_manifest(text: &str) -> Result<Vec<(String, String)>, usize> {
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        let Some((hex, name)) = line.split_once("  ") else { return Err(i + 1) };
        if hex.len() != 64 || !hex.bytes().all(|b| b.is_ascii_hexdigit()) {
            return Err(i + 1);
        }
        out.push((name.to_string(), hex.to_string()));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_of_abc() {
        // FIPS 180-2, appendix B.1 ("abc").
        assert_eq!(sha256_hex(b"abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    }

    #[test]
    fn manifest_round_trip() {
        let m = manifest(&[("a.txt", sha256_hex(b"abc")), ("b.txt", sha256_hex(b""))]);
        let parsed = parse_manifest(&m).unwrap();
        assert_eq!(parsed[0].0, "a.txt");
        assert_eq!(parsed[1].1, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
    }

    #[test]
    fn hashing_writer_matches_the_one_shot_hash() {
        use std::io::Write;
        let mut w = HashingWriter::new(Vec::new());
        w.write_all(b"ab").unwrap();
        w.write_all(b"c").unwrap();
        let (bytes, hex) = w.finish().unwrap();
        assert_eq!(bytes, b"abc");
        assert_eq!(hex, sha256_hex(b"abc"));
    }
}

//! The run manifest (`manifest.json`): what produced a result directory, from which inputs,
//! with which settings, so a result can be traced and reproduced.
//!
//! Inputs are identified by their SHA-256 digest (FIPS 180-4), computed while streaming the
//! file; timestamps are RFC 3339 in UTC, converted from the system clock with the
//! days-to-civil-date algorithm of H. Hinnant ("chrono-Compatible Low-Level Date Algorithms").

use crate::error::{Error, Result};
use serde::Serialize;
use sha2::{Digest, Sha256};
use std::fs::File;
use std::io::{BufWriter, Read, Write};
use std::path::{Path, PathBuf};
use std::time::{Duration, SystemTime, UNIX_EPOCH};

/// One input file as recorded in the manifest.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct InputFile {
    /// The path as the user gave it.
    pub path: PathBuf,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the contents, lower-case hex.
    pub sha256: String,
}

impl InputFile {
    /// Hash `path` (streamed) and record its size.
    pub fn hash(path: &Path) -> Result<Self> {
        let (sha256, bytes) = sha256_file(path)?;
        Ok(InputFile {
            path: path.to_path_buf(),
            bytes,
            sha256,
        })
    }
}

/// Wall-clock time spent in one stage.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct StageTime {
    /// Stage name (`read`, `spectrum`, ...).
    pub stage: String,
    /// Seconds.
    pub seconds: f64,
}

/// Everything `manifest.json` records. Fill it during the run, then [`Manifest::write`].
#[derive(Clone, Debug)]
pub struct Manifest {
    /// When the run started.
    pub started: SystemTime,
    /// Input files with their digests.
    pub inputs: Vec<InputFile>,
    /// The fully resolved settings (every default filled in), as given by the caller.
    pub settings: serde_json::Value,
    /// The random seed of the bootstrap or generator, if any.
    pub seed: Option<u64>,
    /// Time per stage, in run order.
    pub stages: Vec<StageTime>,
    /// Warnings raised during the run.
    pub warnings: Vec<String>,
    /// What was read: configurations, bins, dropped configurations (JSON null when the caller
    /// has nothing to say).
    pub data: serde_json::Value,
}

#[derive(Serialize)]
struct ManifestJson<'a> {
    tool: &'static str,
    version: &'static str,
    started: String,
    finished: String,
    seconds: f64,
    seed: Option<u64>,
    inputs: &'a [InputFile],
    stages: &'a [StageTime],
    warnings: &'a [String],
    #[serde(skip_serializing_if = "serde_json::Value::is_null")]
    data: &'a serde_json::Value,
    settings: &'a serde_json::Value,
}

impl Manifest {
    /// A manifest for a run starting now.
    pub fn start(settings: serde_json::Value, seed: Option<u64>) -> Self {
        Manifest {
            started: SystemTime::now(),
            inputs: Vec::new(),
            settings,
            seed,
            stages: Vec::new(),
            warnings: Vec::new(),
            data: serde_json::Value::Null,
        }
    }

    /// Hash an input file and record it.
    pub fn add_input(&mut self, path: &Path) -> Result<()> {
        self.inputs.push(InputFile::hash(path)?);
        Ok(())
    }

    /// Record the time spent in `stage`.
    pub fn add_stage(&mut self, stage: impl Into<String>, elapsed: Duration) {
        self.stages.push(StageTime {
            stage: stage.into(),
            seconds: elapsed.as_secs_f64(),
        });
    }

    fn view(&self, finished: SystemTime) -> ManifestJson<'_> {
        ManifestJson {
            tool: env!("CARGO_PKG_NAME"),
            version: env!("CARGO_PKG_VERSION"),
            started: rfc3339(self.started),
            finished: rfc3339(finished),
            seconds: finished
                .duration_since(self.started)
                .map(|d| d.as_secs_f64())
                .unwrap_or(0.0),
            seed: self.seed,
            inputs: &self.inputs,
            stages: &self.stages,
            warnings: &self.warnings,
            data: &self.data,
            settings: &self.settings,
        }
    }

    /// The manifest as JSON, with `finished` as end time.
    pub fn to_json(&self, finished: SystemTime) -> serde_json::Value {
        // Serializing strings, numbers and an existing Value cannot fail.
        serde_json::to_value(self.view(finished)).unwrap_or(serde_json::Value::Null)
    }

    /// Write the manifest, finished now, to `path` as pretty-printed JSON with keys in a
    /// fixed, readable order: tool, version, started, finished, seconds, seed, inputs,
    /// stages, warnings, data, settings.
    pub fn write(&self, path: &Path) -> Result<()> {
        let file = File::create(path).map_err(|e| Error::io(path, e))?;
        let mut w = BufWriter::new(file);
        serde_json::to_writer_pretty(&mut w, &self.view(SystemTime::now()))
            .map_err(|e| Error::io(path, e.into()))?;
        w.write_all(b"\n")
            .and_then(|()| w.flush())
            .map_err(|e| Error::io(path, e))
    }
}

/// SHA-256 of a file, streamed in 64 KiB blocks: (lower-case hex digest, size in bytes).
pub fn sha256_file(path: &Path) -> Result<(String, u64)> {
    sha256_file_unless(path, || false).map(|d| d.unwrap_or_default())
}

/// [`sha256_file`], abandoned (`Ok(None)`) as soon as `stop()` says so; it is asked before
/// every block (a background hash whose run has failed need not read the file to its end).
pub fn sha256_file_unless(path: &Path, stop: impl Fn() -> bool) -> Result<Option<(String, u64)>> {
    let mut file = File::open(path).map_err(|e| Error::io(path, e))?;
    let mut hasher = Sha256::new();
    let mut buf = vec![0u8; 64 * 1024];
    let mut total = 0u64;
    loop {
        if stop() {
            return Ok(None);
        }
        let n = match file.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(Error::io(path, e)),
        };
        hasher.update(&buf[..n]);
        total += n as u64;
    }
    Ok(Some((hex(&hasher.finalize()), total)))
}

/// SHA-256 of a byte string, lower-case hex.
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// `t` as an RFC 3339 UTC timestamp with whole seconds, e.g. `2000-02-29T00:00:00Z`.
pub fn rfc3339(t: SystemTime) -> String {
    let secs: i64 = match t.duration_since(UNIX_EPOCH) {
        Ok(d) => i64::try_from(d.as_secs()).unwrap_or(i64::MAX),
        Err(before) => {
            // Before 1970: round down to the whole second.
            let d = before.duration();
            let whole = i64::try_from(d.as_secs()).unwrap_or(i64::MAX);
            -whole - i64::from(d.subsec_nanos() > 0)
        }
    };
    rfc3339_from_unix(secs)
}

/// Seconds since 1970-01-01T00:00:00Z as an RFC 3339 UTC timestamp.
pub fn rfc3339_from_unix(secs: i64) -> String {
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400);
    let (y, m, d) = civil_from_days(days);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

/// Proleptic Gregorian (year, month, day) of the day `z` counted from 1970-01-01
/// (H. Hinnant, "chrono-Compatible Low-Level Date Algorithms", `civil_from_days`).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097); // [0, 146096]
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365; // [0, 399]
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100); // [0, 365]
    let mp = (5 * doy + 2) / 153; // [0, 11], March = 0
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let y = yoe + era * 400 + i64::from(m <= 2);
    (y, m, d)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_fips_vectors() {
        // FIPS 180-2, Appendix B.1 and B.2 (one- and two-block messages).
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(
            sha256_hex(b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq"),
            "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"
        );
        // Empty message (NIST example values, from memory).
        assert_eq!(
            sha256_hex(b""),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
    }

    #[test]
    fn sha256_file_streams_across_blocks() {
        // FIPS 180-2, Appendix B.3: one million repetitions of `a` (spans 16 read blocks).
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.txt");
        std::fs::write(&p, vec![b'a'; 1_000_000]).unwrap();
        let (digest, n) = sha256_file(&p).unwrap();
        assert_eq!(
            digest,
            "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"
        );
        assert_eq!(n, 1_000_000);
        // Asked to stop after four blocks, the hash is abandoned there.
        let asked = std::cell::Cell::new(0);
        let stop = || {
            asked.set(asked.get() + 1);
            asked.get() > 4
        };
        assert_eq!(sha256_file_unless(&p, stop).unwrap(), None);
        assert_eq!(asked.get(), 5, "stopped at the fifth of 16 blocks");
        let whole = sha256_file_unless(&p, || false).unwrap();
        assert_eq!(whole, Some((digest, n)));
    }

    #[test]
    fn missing_input_names_the_file() {
        let err = sha256_file(Path::new("/nonexistent/c2.csv"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("/nonexistent/c2.csv"), "{err}");
    }

    #[test]
    fn rfc3339_known_instants() {
        // The Unix epoch; a leap day of a year divisible by 400; the 10^9-second instant
        // (2001-09-09T01:46:40Z, widely quoted); one second before the epoch.
        assert_eq!(rfc3339_from_unix(0), "1970-01-01T00:00:00Z");
        assert_eq!(rfc3339_from_unix(951_782_400), "2000-02-29T00:00:00Z");
        assert_eq!(rfc3339_from_unix(1_000_000_000), "2001-09-09T01:46:40Z");
        assert_eq!(rfc3339_from_unix(-1), "1969-12-31T23:59:59Z");
        // 1900 is not a leap year: the day after 1900-02-28 is 1900-03-01 (25 508 days, as
        // counted by Python's datetime.date, before the epoch).
        assert_eq!(rfc3339_from_unix(-2_203_891_200), "1900-03-01T00:00:00Z");
        assert_eq!(
            rfc3339(UNIX_EPOCH + Duration::from_secs(951_782_400 + 86_399)),
            "2000-02-29T23:59:59Z"
        );
        assert_eq!(
            rfc3339(UNIX_EPOCH - Duration::from_millis(500)),
            "1969-12-31T23:59:59Z"
        );
    }

    #[test]
    fn manifest_records_inputs_settings_and_order() {
        let dir = tempfile::tempdir().unwrap();
        let input = dir.path().join("abc.csv");
        std::fs::write(&input, b"abc").unwrap();
        let mut m = Manifest::start(serde_json::json!({"fit": {"tmin": 3}}), Some(42));
        m.started = UNIX_EPOCH + Duration::from_secs(951_782_400);
        m.add_input(&input).unwrap();
        m.add_stage("read", Duration::from_millis(1500));
        m.warnings.push("channel x: 2 samples non-finite".into());
        let v = m.to_json(UNIX_EPOCH + Duration::from_secs(951_782_410));
        assert_eq!(v["version"], env!("CARGO_PKG_VERSION"));
        assert_eq!(v["started"], "2000-02-29T00:00:00Z");
        assert_eq!(v["finished"], "2000-02-29T00:00:10Z");
        assert_eq!(v["seed"], 42);
        assert_eq!(
            v["inputs"][0]["sha256"],
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(v["inputs"][0]["bytes"], 3);
        assert_eq!(v["stages"][0]["seconds"], 1.5);
        assert_eq!(v["settings"]["fit"]["tmin"], 3);

        let out = dir.path().join("manifest.json");
        m.write(&out).unwrap();
        let text = std::fs::read_to_string(&out).unwrap();
        let pos = |k: &str| text.find(&format!("\"{k}\"")).unwrap();
        assert!(pos("tool") < pos("version") && pos("version") < pos("started"));
        assert!(pos("warnings") < pos("settings"));
        let back: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert_eq!(back["warnings"][0], "channel x: 2 samples non-finite");
    }
}

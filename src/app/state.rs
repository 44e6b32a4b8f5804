//! Persistent state in the state directory: small JSON files written
//! atomically (temporary file, fsync, rename, fsync of the directory), so a
//! power cut leaves the old file or the new one, never half of one.

use std::fs::{self, File};
use std::io::Write;
use std::path::{Path, PathBuf};

use serde::de::DeserializeOwned;
use serde::Serialize;

/// Writes `value` as JSON to `dir/name` atomically.
pub fn save<T: Serialize>(dir: &Path, name: &str, value: &T) -> std::io::Result<()> {
    fs::create_dir_all(dir)?;
    let path = dir.join(name);
    let tmp = dir.join(format!(".{name}.tmp"));
    let bytes = serde_json::to_vec_pretty(value).map_err(std::io::Error::other)?;
    {
        let mut f = File::create(&tmp)?;
        f.write_all(&bytes)?;
        f.sync_all()?;
    }
    fs::rename(&tmp, &path)?;
    // The rename itself is durable once the directory is synced.
    if let Ok(d) = File::open(dir) {
        let _ = d.sync_all();
    }
    Ok(())
}

/// What loading found.
pub enum Loaded<T> {
    Value(T),
    /// No file yet (first start).
    Missing,
    /// Unreadable or corrupt: moved aside to the returned path.
    Corrupt(PathBuf, String),
}

/// Reads `dir/name`; a corrupt file is renamed `name.bad` and reported.
pub fn load<T: DeserializeOwned>(dir: &Path, name: &str) -> Loaded<T> {
    let path = dir.join(name);
    let bytes = match fs::read(&path) {
        Ok(b) => b,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Loaded::Missing,
        Err(e) => return Loaded::Corrupt(path, e.to_string()),
    };
    match serde_json::from_slice(&bytes) {
        Ok(v) => Loaded::Value(v),
        Err(e) => {
            let bad = dir.join(format!("{name}.bad"));
            let _ = fs::rename(&path, &bad);
            Loaded::Corrupt(bad, e.to_string())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_corrupt_file() {
        let dir = std::env::temp_dir().join(format!("wallflux-state-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        assert!(matches!(load::<Vec<f64>>(&dir, "x.json"), Loaded::Missing));
        save(&dir, "x.json", &vec![1.5, 2.5]).unwrap();
        match load::<Vec<f64>>(&dir, "x.json") {
            Loaded::Value(v) => assert_eq!(v, vec![1.5, 2.5]),
            _ => panic!("not loaded"),
        }
        assert!(!dir.join(".x.json.tmp").exists());
        fs::write(dir.join("x.json"), b"{half a fi").unwrap();
        match load::<Vec<f64>>(&dir, "x.json") {
            Loaded::Corrupt(p, _) => assert!(p.ends_with("x.json.bad") && p.exists()),
            _ => panic!("corrupt file accepted"),
        }
        assert!(matches!(load::<Vec<f64>>(&dir, "x.json"), Loaded::Missing));
        let _ = fs::remove_dir_all(&dir);
    }
}

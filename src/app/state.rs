//! Persistent state in the state directory: small JSON files written
//! atomically (temporary file, fsync, rename, fsync of the directory), so a
//! power cut leaves the old file or the new one, never half of one.

use std::collections::BTreeMap;
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

/// Entries by name that were read, and those left out (name, why).
pub type Entries<T> = (BTreeMap<String, T>, Vec<(String, String)>);

/// Reads a JSON object of entries by name (`dir/name`), entry by entry: an
/// entry that does not read as a `T` costs only itself and is returned by
/// name with why. A file that is not an object at all is moved aside as
/// [`load`] does.
pub fn load_entries<T: DeserializeOwned>(dir: &Path, name: &str) -> Loaded<Entries<T>> {
    match load::<BTreeMap<String, serde_json::Value>>(dir, name) {
        Loaded::Value(raw) => {
            let mut good = BTreeMap::new();
            let mut bad = Vec::new();
            for (k, v) in raw {
                match serde_json::from_value::<T>(v) {
                    Ok(t) => {
                        good.insert(k, t);
                    }
                    Err(e) => bad.push((k, e.to_string())),
                }
            }
            Loaded::Value((good, bad))
        }
        Loaded::Missing => Loaded::Missing,
        Loaded::Corrupt(p, e) => Loaded::Corrupt(p, e),
    }
}

/// Moves `dir/name` aside (to `name.bad`) after its content failed a check
/// beyond parsing; returns where it went.
pub fn move_aside(dir: &Path, name: &str) -> PathBuf {
    let bad = dir.join(format!("{name}.bad"));
    let _ = fs::rename(dir.join(name), &bad);
    bad
}

#[cfg(test)]
mod tests {
    use super::*;

    /// One bad entry costs only itself; a file that is no object at all is
    /// moved aside.
    #[test]
    fn entries_load_one_by_one() {
        let dir = std::env::temp_dir().join(format!("wallflux-entries-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        fs::create_dir_all(&dir).unwrap();
        fs::write(
            dir.join("e.json"),
            br#"{"a": [1.0, 2.0], "b": "not a list", "c": [], "d": [1, "x"]}"#,
        )
        .unwrap();
        let Loaded::Value((good, bad)) = load_entries::<Vec<f64>>(&dir, "e.json") else {
            panic!("not loaded");
        };
        assert_eq!(good.keys().collect::<Vec<_>>(), ["a", "c"]);
        assert_eq!(good["a"], vec![1.0, 2.0]);
        assert_eq!(
            bad.iter().map(|(k, _)| k.as_str()).collect::<Vec<_>>(),
            ["b", "d"]
        );
        fs::write(dir.join("e.json"), b"[1, 2, 3]").unwrap();
        assert!(matches!(
            load_entries::<Vec<f64>>(&dir, "e.json"),
            Loaded::Corrupt(p, _) if p.ends_with("e.json.bad")
        ));
        let _ = fs::remove_dir_all(&dir);
    }

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

//! Where profiles come from: the built-in set embedded at build time, and a
//! user directory (`--profiles DIR` or `RESTVOLT_PROFILES`) whose files
//! override a built-in of the same id.

use super::{Profile, ProfileError};
use std::collections::BTreeMap;
use std::path::Path;

mod embedded {
    include!(concat!(env!("OUT_DIR"), "/embedded_profiles.rs"));
}

/// Environment variable naming a directory of user profiles.
pub const PROFILES_ENV: &str = "RESTVOLT_PROFILES";

/// All profiles in effect, by id.
#[derive(Clone, Debug, Default)]
pub struct ProfileStore {
    profiles: BTreeMap<String, Profile>,
    notices: Vec<String>,
}

impl ProfileStore {
    /// The built-in profiles only.
    ///
    /// Each profile works out its own tables as it loads (temperature
    /// coefficients from the electrolyte model: nine-tenths of the work), so
    /// they are loaded side by side on the machine's cores; which file gives
    /// which profile, and the first error in file order, are as one by one.
    pub fn builtin() -> Result<ProfileStore, ProfileError> {
        let load = |(name, text): &(&str, &str)| {
            Profile::from_toml(text, &format!("built-in profiles/{name}"))
        };
        let files = embedded::EMBEDDED;
        let threads = std::thread::available_parallelism()
            .map_or(1, |n| n.get())
            .min(files.len());
        let loaded: Vec<Result<Profile, ProfileError>> = if threads <= 1 {
            files.iter().map(load).collect()
        } else {
            // Files dealt out in turn, so that each thread has some of the
            // large and some of the small ones.
            let mut parts: Vec<Vec<(usize, Result<Profile, ProfileError>)>> =
                std::thread::scope(|scope| {
                    let handles: Vec<_> = (0..threads)
                        .map(|t| {
                            scope.spawn(move || {
                                (t..files.len())
                                    .step_by(threads)
                                    .map(|i| (i, load(&files[i])))
                                    .collect::<Vec<_>>()
                            })
                        })
                        .collect();
                    handles
                        .into_iter()
                        .map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
                        .collect()
                });
            let mut all: Vec<_> = parts.iter_mut().flat_map(std::mem::take).collect();
            all.sort_by_key(|(i, _)| *i);
            all.into_iter().map(|(_, p)| p).collect()
        };
        let mut store = ProfileStore::default();
        for p in loaded {
            let p = p?;
            store.profiles.insert(p.id().to_string(), p);
        }
        Ok(store)
    }

    /// Built-ins plus the `*.toml` files of a user directory. A user profile
    /// with a built-in's id replaces it, and a notice says so.
    pub fn with_user_dir(dir: Option<&Path>) -> Result<ProfileStore, ProfileError> {
        let mut store = ProfileStore::builtin()?;
        let Some(dir) = dir else {
            return Ok(store);
        };
        let io = |e: std::io::Error| ProfileError::Io {
            path: dir.display().to_string(),
            message: e.to_string(),
        };
        let mut paths: Vec<_> = std::fs::read_dir(dir)
            .map_err(io)?
            .filter_map(Result::ok)
            .map(|e| e.path())
            .filter(|p| p.extension().is_some_and(|x| x == "toml"))
            .collect();
        paths.sort();
        for path in paths {
            let p = load_file(&path)?;
            if let Some(old) = store.profiles.get(p.id()) {
                store.notices.push(format!(
                    "profile '{}' from {} overrides the one from {}",
                    p.id(),
                    path.display(),
                    old.origin
                ));
            }
            store.profiles.insert(p.id().to_string(), p);
        }
        Ok(store)
    }

    /// Look a profile up by id; an unknown id gets the nearest known one as a suggestion.
    pub fn get(&self, id: &str) -> Result<&Profile, ProfileError> {
        self.profiles.get(id).ok_or_else(|| ProfileError::Unknown {
            id: id.to_string(),
            suggestion: self.suggest(id),
        })
    }

    fn suggest(&self, id: &str) -> Option<String> {
        self.profiles
            .keys()
            .map(|k| (strsim::damerau_levenshtein(id, k), k))
            .filter(|(d, k)| *d <= 3.max(k.len() / 3))
            .min()
            .map(|(_, k)| k.clone())
    }

    /// All profiles, sorted by id.
    pub fn iter(&self) -> impl Iterator<Item = &Profile> {
        self.profiles.values()
    }

    /// Notices about overrides, for the user.
    pub fn notices(&self) -> &[String] {
        &self.notices
    }
}

/// Load and validate one profile file.
pub fn load_file(path: &Path) -> Result<Profile, ProfileError> {
    let bytes = std::fs::read(path).map_err(|e| ProfileError::Io {
        path: path.display().to_string(),
        message: e.to_string(),
    })?;
    let text = crate::units::utf8_text(&bytes).map_err(|e| ProfileError::Syntax {
        origin: path.display().to_string(),
        line: e.line as usize,
        message: format!("{e}; re-save the file as UTF-8"),
    })?;
    Profile::from_toml(text, &path.display().to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_built_ins_loaded_side_by_side_are_those_loaded_one_by_one() {
        let store = ProfileStore::builtin().unwrap();
        let one_by_one: Vec<String> = embedded::EMBEDDED
            .iter()
            .map(|(name, text)| {
                let p = Profile::from_toml(text, &format!("built-in profiles/{name}")).unwrap();
                format!("{p:?}")
            })
            .collect::<std::collections::BTreeSet<_>>()
            .into_iter()
            .collect();
        let got: std::collections::BTreeSet<String> =
            store.iter().map(|p| format!("{p:?}")).collect();
        assert_eq!(got.len(), embedded::EMBEDDED.len());
        assert_eq!(got.into_iter().collect::<Vec<_>>(), one_by_one);
    }
}

//! Where the station file is found: `--station FILE` first, then the `REGULUS_STATION`
//! environment variable, then `regulus/station.toml` in the user's configuration folder
//! (`$XDG_CONFIG_HOME`, or `$HOME/.config` when that is unset, as the XDG base directory
//! specification says). The search itself is pure: the caller hands in the environment.

use std::ffi::OsString;
use std::path::{Path, PathBuf};

/// Environment variable naming the station file.
pub const STATION_ENV: &str = "REGULUS_STATION";

/// Where a station file came from (for messages).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Located {
    Argument(PathBuf),
    Environment(PathBuf),
    ConfigFolder(PathBuf),
}

impl Located {
    pub fn path(&self) -> &Path {
        match self {
            Located::Argument(p) | Located::Environment(p) | Located::ConfigFolder(p) => p,
        }
    }
}

/// Find the station file. `exists` tells whether a file exists (only the configuration
/// folder's file is looked for: an explicit or environment path is used as given, so a wrong
/// one is reported rather than skipped).
pub fn locate(
    explicit: Option<&Path>,
    env_station: Option<OsString>,
    xdg_config_home: Option<OsString>,
    home: Option<OsString>,
    exists: impl Fn(&Path) -> bool,
) -> Option<Located> {
    if let Some(p) = explicit {
        return Some(Located::Argument(p.to_path_buf()));
    }
    if let Some(p) = env_station.filter(|p| !p.is_empty()) {
        return Some(Located::Environment(PathBuf::from(p)));
    }
    // XDG: an empty or relative $XDG_CONFIG_HOME is ignored.
    let config = xdg_config_home
        .map(PathBuf::from)
        .filter(|p| p.is_absolute())
        .or_else(|| {
            home.filter(|h| !h.is_empty())
                .map(|h| PathBuf::from(h).join(".config"))
        })?;
    let file = config.join("regulus").join("station.toml");
    exists(&file).then_some(Located::ConfigFolder(file))
}

/// [`locate`] with this process's environment and file system.
pub fn locate_from_env(explicit: Option<&Path>) -> Option<Located> {
    locate(
        explicit,
        std::env::var_os(STATION_ENV),
        std::env::var_os("XDG_CONFIG_HOME"),
        std::env::var_os("HOME"),
        |p| p.is_file(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn os(s: &str) -> Option<OsString> {
        Some(OsString::from(s))
    }

    #[test]
    fn argument_then_environment_then_config_folder() {
        let yes = |_: &Path| true;
        let no = |_: &Path| false;
        assert_eq!(
            locate(
                Some(Path::new("a.toml")),
                os("/e.toml"),
                None,
                os("/h"),
                yes
            ),
            Some(Located::Argument("a.toml".into()))
        );
        assert_eq!(
            locate(None, os("/e.toml"), os("/x"), os("/h"), yes),
            Some(Located::Environment("/e.toml".into()))
        );
        // XDG base directory specification: $XDG_CONFIG_HOME, default $HOME/.config.
        assert_eq!(
            locate(None, None, os("/x"), os("/h"), yes),
            Some(Located::ConfigFolder("/x/regulus/station.toml".into()))
        );
        assert_eq!(
            locate(None, os(""), None, os("/h"), yes),
            Some(Located::ConfigFolder(
                "/h/.config/regulus/station.toml".into()
            ))
        );
        // A relative $XDG_CONFIG_HOME is invalid per the specification and ignored.
        assert_eq!(
            locate(None, None, os("rel"), os("/h"), yes),
            Some(Located::ConfigFolder(
                "/h/.config/regulus/station.toml".into()
            ))
        );
        assert_eq!(locate(None, None, os("/x"), os("/h"), no), None);
        assert_eq!(locate(None, None, None, None, yes), None);
    }
}

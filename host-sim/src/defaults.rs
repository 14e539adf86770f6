//! Bench defaults: a `glowsim.toml` in the working directory (or `--config FILE`) fills in options
//! that a command line leaves out, so a bench can run `glowsim batch traces/` or `glowsim record`
//! with no flags.
//!
//! # Format (TOML; every key optional, unknown keys are errors)
//!
//! ```toml
//! instrument = "instruments/bench-2048.toml"  # instrument file (relative to this file)
//! profile = "deuterium"                       # bundled profile name or profile file (relative path ok)
//! mode = "verify"                             # verify | calibrate | blind
//!
//! [batch]
//! out = "out/batch"                           # output folder of `glowsim batch`
//!
//! [demo]
//! out = "out/demo"                            # output folder of `glowsim demo`
//!
//! [record]
//! port = "/dev/ttyACM0"                       # serial port of the board
//! baud = 115200
//! out = "recorded.trace"
//! ```
//!
//! Relative paths are taken relative to the folder holding the file, so the file can sit beside its
//! instrument and profile files. Command-line options always win.
use crate::toml_keys::{parse, Section};
use std::path::{Path, PathBuf};

/// The file looked for in the working directory when `--config` is not given.
pub const DEFAULT_FILE: &str = "glowsim.toml";

/// Values of a defaults file (paths already resolved against its folder).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Defaults {
    /// Where the values came from (None: no file).
    pub source: Option<PathBuf>,
    /// Instrument file.
    pub instrument: Option<PathBuf>,
    /// Profile name or file.
    pub profile: Option<String>,
    /// verify | calibrate | blind.
    pub mode: Option<String>,
    /// `glowsim batch` output folder.
    pub batch_out: Option<PathBuf>,
    /// `glowsim demo` output folder.
    pub demo_out: Option<PathBuf>,
    /// `glowsim record` port.
    pub record_port: Option<PathBuf>,
    /// `glowsim record` line speed.
    pub record_baud: Option<u32>,
    /// `glowsim record` output file.
    pub record_out: Option<PathBuf>,
}

impl Defaults {
    /// Loads `--config FILE` (must exist) or `./glowsim.toml` (if it exists), else no defaults.
    pub fn load(explicit: Option<&Path>) -> Result<Defaults, String> {
        let path = match explicit {
            Some(p) => p.to_path_buf(),
            None => {
                let p = PathBuf::from(DEFAULT_FILE);
                if !p.is_file() {
                    return Ok(Defaults::default());
                }
                p
            }
        };
        let text = std::fs::read_to_string(&path)
            .map_err(|e| format!("cannot read config file {}: {e}", path.display()))?;
        let base = path.parent().unwrap_or(Path::new("")).to_path_buf();
        let mut d = Defaults::parse(&text, &base)
            .map_err(|e| format!("config file {}: {e}", path.display()))?;
        d.source = Some(path);
        Ok(d)
    }

    /// Parses a file's text; relative paths are joined to `base`.
    pub fn parse(text: &str, base: &Path) -> Result<Defaults, String> {
        let table = parse(text, "config file")?;
        let top = Section::top(&table);
        let path = |s: &str| -> PathBuf {
            let p = PathBuf::from(s);
            if p.is_absolute() {
                p
            } else {
                base.join(p)
            }
        };
        let mut d = Defaults {
            instrument: top.str_opt("instrument")?.map(path),
            ..Defaults::default()
        };
        d.profile = top.str_opt("profile")?.map(|p| {
            // A bundled name stays a name; anything else is a file path relative to the config file.
            if glowcheck::judge::TubeProfile::bundled(p).is_some() {
                p.to_string()
            } else {
                path(p).display().to_string()
            }
        });
        if let Some(m) = top.str_opt("mode")? {
            if !["verify", "calibrate", "blind"].contains(&m) {
                return Err(format!(
                    "`mode` = {}: expected \"verify\", \"calibrate\" or \"blind\"",
                    crate::excerpt::excerpt(m, '"')
                ));
            }
            d.mode = Some(m.to_string());
        }
        if let Some(b) = top.table("batch")? {
            d.batch_out = b.str_opt("out")?.map(path);
            b.finish()?;
        }
        if let Some(b) = top.table("demo")? {
            d.demo_out = b.str_opt("out")?.map(path);
            b.finish()?;
        }
        if let Some(r) = top.table("record")? {
            d.record_port = r.str_opt("port")?.map(PathBuf::from);
            d.record_baud = r.int_opt("baud", 50, 4_000_000)?.map(|v| v as u32);
            d.record_out = r.str_opt("out")?.map(path);
            r.finish()?;
        }
        top.finish()?;
        Ok(d)
    }

    /// The mode, parsed (verify when neither the command line nor the file says).
    pub fn mode_or(&self, cli: Option<crate::check_cmd::ModeArg>) -> crate::check_cmd::ModeArg {
        use crate::check_cmd::ModeArg;
        cli.unwrap_or(match self.mode.as_deref() {
            Some("calibrate") => ModeArg::Calibrate,
            Some("blind") => ModeArg::Blind,
            _ => ModeArg::Verify,
        })
    }

    /// A required value: the command line's, else the file's, else an error naming both.
    pub fn pick<T: Clone>(
        cli: &Option<T>,
        file: &Option<T>,
        flag: &str,
        key: &str,
    ) -> Result<T, String> {
        cli.clone().or_else(|| file.clone()).ok_or_else(|| {
            format!("{flag} not given and no `{key}` in {DEFAULT_FILE} (or --config FILE)")
        })
    }
}

/// Writes `bytes` to `path` through a temporary file in the same folder and a rename, so that a
/// reader (or an interrupt) never sees a partial file.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), String> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .ok_or_else(|| format!("{}: not a file name", path.display()))?
        .to_string_lossy();
    let tmp = dir.join(format!(".{name}.tmp.{}", std::process::id()));
    let result = std::fs::write(&tmp, bytes).and_then(|()| std::fs::rename(&tmp, path));
    result.map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        format!("cannot write {}: {e}", path.display())
    })
}

/// True for the temporary files [`write_atomic`] leaves behind when a process is killed outright.
pub fn is_temp_name(name: &str) -> bool {
    name.starts_with('.') && name.contains(".tmp.")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_every_key_and_resolves_paths() {
        let d = Defaults::parse(
            "instrument = \"inst/b.toml\"\nprofile = \"deuterium\"\nmode = \"calibrate\"\n\
             [batch]\nout = \"o\"\n[demo]\nout = \"/tmp/d\"\n[record]\nport = \"/dev/ttyACM0\"\nbaud = 9600\nout = \"r.trace\"\n",
            Path::new("/bench"),
        )
        .unwrap();
        assert_eq!(d.instrument, Some(PathBuf::from("/bench/inst/b.toml")));
        assert_eq!(d.profile.as_deref(), Some("deuterium"));
        assert_eq!(d.batch_out, Some(PathBuf::from("/bench/o")));
        assert_eq!(d.demo_out, Some(PathBuf::from("/tmp/d")));
        assert_eq!(d.record_baud, Some(9600));
        assert_eq!(d.record_out, Some(PathBuf::from("/bench/r.trace")));
        assert_eq!(d.mode_or(None), crate::check_cmd::ModeArg::Calibrate);
        let p = Defaults::parse("profile = \"p/lamp.toml\"\n", Path::new("/b")).unwrap();
        assert_eq!(p.profile.as_deref(), Some("/b/p/lamp.toml"));
    }

    #[test]
    fn typos_and_bad_values_are_errors() {
        let e = Defaults::parse("instrumnet = \"x\"\n", Path::new("")).unwrap_err();
        assert!(e.contains("instrumnet"), "{e}");
        let e = Defaults::parse("mode = \"fast\"\n", Path::new("")).unwrap_err();
        assert!(e.contains("mode"), "{e}");
        let e = Defaults::parse("[record]\nbaud = 3\n", Path::new("")).unwrap_err();
        assert!(e.contains("record.baud"), "{e}");
    }

    #[test]
    fn atomic_write_leaves_no_temp() {
        let dir = std::env::temp_dir().join(format!("glowsim-atomic-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let f = dir.join("a.json");
        write_atomic(&f, b"{}").unwrap();
        assert_eq!(std::fs::read(&f).unwrap(), b"{}");
        let names: Vec<_> = std::fs::read_dir(&dir)
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names.len(), 1);
        std::fs::remove_dir_all(&dir).unwrap();
    }
}

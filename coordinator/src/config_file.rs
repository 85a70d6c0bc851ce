//! The configuration file of `serve`: a flat TOML table whose keys are the long flags of
//! `serve` (and the global flags) with `_` for `-`, documented in
//! `deploy/coordinator.example.toml`.
//!
//! Precedence, lowest first: built-in default, the file, the environment variable, the flag.
//! It is obtained without a second settings type: every value read from the file becomes the
//! default value of its clap argument, and clap already prefers an environment variable to a
//! default and a flag to both.
//!
//! This module reads and checks the file only. It knows nothing of what the settings mean;
//! their names, types and ranges are those of the clap arguments.
//!
//! Wiring in `main`:
//! ```ignore
//! let args: Vec<OsString> = std::env::args_os().collect();
//! let cmd = config_file::apply_to(Cli::command(), "serve", &args, &config_file::process_env)?;
//! let cli = Cli::from_arg_matches(&cmd.get_matches_from(args))?;
//! ```
//! with a `--config FILE` argument (env `CUBEHUNT_CONFIG`) declared on `serve` so that clap
//! accepts and documents it.

use clap::{Arg, ArgAction, Command};
use std::ffi::{OsStr, OsString};
use std::path::{Path, PathBuf};

/// Largest configuration file read, in bytes.
pub const MAX_FILE_BYTES: u64 = 64 * 1024;
/// The flag and the environment variable that name the file.
pub const CONFIG_FLAG: &str = "--config";
pub const CONFIG_ENV: &str = "CUBEHUNT_CONFIG";

#[derive(Debug, thiserror::Error)]
pub enum ConfigFileError {
    #[error("cannot read the configuration file {path}: {why}. Check the path given to --config (or CUBEHUNT_CONFIG).")]
    Read { path: PathBuf, why: String },
    #[error("the configuration file {path} is larger than {MAX_FILE_BYTES} bytes; it should be a few lines (see deploy/coordinator.example.toml).")]
    TooLarge { path: PathBuf },
    #[error("the configuration file {path} is not valid TOML: {why}")]
    Parse { path: PathBuf, why: String },
    #[error("the configuration file {path}: {why}")]
    Key { path: PathBuf, why: String },
}

/// How the environment is read (a plain function, so that tests need not touch the process
/// environment).
pub type Env<'a> = &'a dyn Fn(&str) -> Option<String>;

pub fn process_env(name: &str) -> Option<String> {
    std::env::var(name).ok()
}

/// The configuration file named on the command line after `subcommand` (`--config FILE` or
/// `--config=FILE`), else by [`CONFIG_ENV`]; `None` when neither is given.
pub fn config_path(args: &[OsString], subcommand: &str, env: Env) -> Option<PathBuf> {
    let mut seen_sub = false;
    let mut it = args.iter().skip(1);
    while let Some(a) = it.next() {
        if a == "--" {
            break;
        }
        if !seen_sub {
            seen_sub = a == subcommand;
            continue;
        }
        if a == CONFIG_FLAG {
            return it.next().map(PathBuf::from);
        }
        if let Some(rest) = a.to_str().and_then(|s| s.strip_prefix("--config=")) {
            return Some(PathBuf::from(rest));
        }
    }
    if !seen_sub {
        return None;
    }
    env(CONFIG_ENV).filter(|s| !s.is_empty()).map(PathBuf::from)
}

/// The `key = value` pairs of a file, in file order, values as the text clap would get.
pub fn read(path: &Path) -> Result<Vec<(String, toml::Value)>, ConfigFileError> {
    use std::io::Read;
    let read_err = |e: std::io::Error| ConfigFileError::Read {
        path: path.to_owned(),
        why: e.to_string(),
    };
    let f = std::fs::File::open(path).map_err(read_err)?;
    let mut text = String::new();
    f.take(MAX_FILE_BYTES + 1)
        .read_to_string(&mut text)
        .map_err(read_err)?;
    if text.len() as u64 > MAX_FILE_BYTES {
        return Err(ConfigFileError::TooLarge {
            path: path.to_owned(),
        });
    }
    let table: toml::Table = text
        .parse()
        .map_err(|e: toml::de::Error| ConfigFileError::Parse {
            path: path.to_owned(),
            why: e.message().to_string(),
        })?;
    Ok(table.into_iter().collect())
}

/// The long flags a file may set: every long argument of `subcommand` and every global one,
/// except help, version and the configuration file itself.
fn settable<'a>(root: &'a Command, sub: &'a Command) -> impl Iterator<Item = &'a Arg> {
    let globals = root.get_arguments().filter(|a| a.is_global_set());
    sub.get_arguments().chain(globals).filter(|a| {
        a.get_long()
            .is_some_and(|l| l != "config" && l != "help" && l != "version")
            && !matches!(
                a.get_action(),
                ArgAction::Help | ArgAction::HelpShort | ArgAction::HelpLong | ArgAction::Version
            )
    })
}

fn file_key(a: &Arg) -> String {
    a.get_long().unwrap_or_default().replace('-', "_")
}

/// The text of one value, checked against the argument's type by clap itself.
fn value_text(arg: &Arg, key: &str, v: &toml::Value) -> Result<String, String> {
    let flag = matches!(arg.get_action(), ArgAction::SetTrue | ArgAction::SetFalse);
    let text = match v {
        toml::Value::String(s) if !flag => s.clone(),
        toml::Value::Integer(i) if !flag => i.to_string(),
        toml::Value::Float(x) if !flag => x.to_string(),
        toml::Value::Boolean(b) => b.to_string(),
        _ if flag => {
            return Err(format!(
                "`{key}` is an on/off setting: write `{key} = true` or `{key} = false`"
            ))
        }
        _ => {
            return Err(format!(
                "`{key}` takes one string or number, not {}",
                v.type_str()
            ))
        }
    };
    if !flag {
        // Let the argument's own value parser judge the value, in isolation from the
        // environment and the rest of the command line.
        let probe = Command::new("config").no_binary_name(true).arg(
            arg.clone()
                .env(None::<&str>)
                .required(false)
                .default_value(None::<&str>),
        );
        let long = format!("--{}", arg.get_long().unwrap_or_default());
        if let Err(e) = probe.try_get_matches_from([OsStr::new(&long), OsStr::new(&text)]) {
            let why = e.kind().as_str().unwrap_or("invalid value").to_string();
            let detail = e.to_string();
            let detail = detail
                .lines()
                .next()
                .unwrap_or("")
                .trim_start_matches("error: ");
            return Err(format!("`{key}` = {text:?}: {why} ({detail})"));
        }
    }
    Ok(text)
}

/// Make every `key = value` of `path` the default of the argument `--key` of `subcommand`
/// (or of a global argument). Unknown keys and values of the wrong type are refused with the
/// file and the key named.
pub fn apply_file(cmd: Command, subcommand: &str, path: &Path) -> Result<Command, ConfigFileError> {
    let entries = read(path)?;
    let key_err = |why: String| ConfigFileError::Key {
        path: path.to_owned(),
        why,
    };
    let sub = cmd
        .find_subcommand(subcommand)
        .ok_or_else(|| {
            key_err(format!(
                "there is no subcommand {subcommand:?} to configure"
            ))
        })?
        .clone();
    let mut sub_defaults = Vec::new();
    let mut global_defaults = Vec::new();
    for (key, value) in entries {
        let arg = settable(&cmd, &sub)
            .find(|a| file_key(a) == key)
            .ok_or_else(|| {
                let known: Vec<String> = settable(&cmd, &sub).map(file_key).collect();
                key_err(format!(
                    "unknown key `{key}`; the keys are: {}",
                    known.join(", ")
                ))
            })?;
        let text = value_text(arg, &key, &value).map_err(key_err)?;
        let id = arg.get_id().as_str().to_string();
        // clap (without its `string` feature) keeps defaults as `&'static str`; the file is
        // read once per process start, so leaking its few values is harmless.
        let text: &'static str = Box::leak(text.into_boxed_str());
        if sub.get_arguments().any(|a| a.get_id() == arg.get_id()) {
            sub_defaults.push((id, text));
        } else {
            global_defaults.push((id, text));
        }
    }
    let mut cmd = cmd;
    for (id, text) in global_defaults {
        cmd = cmd.mut_arg(&id, |a| a.default_value(text).required(false));
    }
    Ok(cmd.mut_subcommand(subcommand, |mut s| {
        for (id, text) in sub_defaults {
            s = s.mut_arg(&id, |a| a.default_value(text).required(false));
        }
        s
    }))
}

/// [`config_path`] then [`apply_file`]; `cmd` unchanged when no file is named.
pub fn apply_to(
    cmd: Command,
    subcommand: &str,
    args: &[OsString],
    env: Env,
) -> Result<Command, ConfigFileError> {
    match config_path(args, subcommand, env) {
        Some(p) => apply_file(cmd, subcommand, &p),
        None => Ok(cmd),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::{CommandFactory, FromArgMatches, Parser, Subcommand};
    use std::collections::HashMap;

    // A command shaped like the coordinator's: a global flag, a `serve` with a required
    // directory, numbers with environment variables, an on/off flag.
    #[derive(Debug, Parser)]
    struct Cli {
        #[arg(long, global = true, env = "T_LOG_JSON")]
        log_json: bool,
        #[command(subcommand)]
        command: Cmd,
    }
    #[derive(Debug, Subcommand)]
    enum Cmd {
        Serve {
            #[arg(long, env = "T_DATA_DIR")]
            data_dir: PathBuf,
            #[arg(long, env = "T_LISTEN", default_value = "127.0.0.1:8480")]
            listen: String,
            #[arg(long, env = "T_HEARTBEAT_S", default_value_t = 60)]
            heartbeat_s: u64,
            #[arg(long, env = "T_DEADLINE_FACTOR", default_value_t = 4.0)]
            deadline_factor: f64,
            #[arg(long, env = "T_DISTINCT_PREFIX", default_value_t = false)]
            distinct_prefix: bool,
            #[arg(long, env = "CUBEHUNT_CONFIG")]
            config: Option<PathBuf>,
        },
        Init {
            #[arg(long)]
            data_dir: PathBuf,
        },
    }

    fn env_of(pairs: &[(&str, &str)]) -> impl Fn(&str) -> Option<String> {
        let m: HashMap<String, String> = pairs
            .iter()
            .map(|(a, b)| (a.to_string(), b.to_string()))
            .collect();
        move |k: &str| m.get(k).cloned()
    }
    fn write(text: &str) -> tempfile::NamedTempFile {
        use std::io::Write;
        let mut f = tempfile::NamedTempFile::new().unwrap();
        f.write_all(text.as_bytes()).unwrap();
        f
    }
    fn args(v: &[&str]) -> Vec<OsString> {
        v.iter().map(OsString::from).collect()
    }
    /// Parse as `main` would. Environment variables given here are set for clap's benefit;
    /// each test uses its own variable names, so they do not interfere.
    fn parse(argv: &[&str], file: Option<&Path>) -> Result<Cli, String> {
        parse_with_env(argv, file, &[])
    }
    /// Tests run in parallel and clap reads the process environment: one at a time.
    static ENV_LOCK: std::sync::Mutex<()> = std::sync::Mutex::new(());
    fn parse_with_env(
        argv: &[&str],
        file: Option<&Path>,
        vars: &[(&str, &str)],
    ) -> Result<Cli, String> {
        let _g = ENV_LOCK.lock().unwrap_or_else(|e| e.into_inner());
        for (k, v) in vars {
            std::env::set_var(k, v);
        }
        let r = parse_locked(argv, file);
        for (k, _) in vars {
            std::env::remove_var(k);
        }
        r
    }
    fn parse_locked(argv: &[&str], file: Option<&Path>) -> Result<Cli, String> {
        let mut cmd = Cli::command();
        if let Some(p) = file {
            cmd = apply_file(cmd, "serve", p).map_err(|e| e.to_string())?;
        }
        let m = cmd
            .try_get_matches_from(args(argv))
            .map_err(|e| e.to_string())?;
        Cli::from_arg_matches(&m).map_err(|e| e.to_string())
    }
    fn serve(c: Cli) -> (bool, PathBuf, String, u64, f64, bool) {
        match c.command {
            Cmd::Serve {
                data_dir,
                listen,
                heartbeat_s,
                deadline_factor,
                distinct_prefix,
                ..
            } => (
                c.log_json,
                data_dir,
                listen,
                heartbeat_s,
                deadline_factor,
                distinct_prefix,
            ),
            Cmd::Init { .. } => panic!("not serve"),
        }
    }

    #[test]
    fn file_values_become_defaults_and_flags_still_win() {
        let f = write("data_dir = \"/srv/from-file\"\nheartbeat_s = 30\ndeadline_factor = 2.5\ndistinct_prefix = true\nlog_json = true\n");
        let (json, dir, listen, hb, factor, prefix) =
            serve(parse(&["c", "serve"], Some(f.path())).unwrap());
        assert!(json);
        assert_eq!(dir, PathBuf::from("/srv/from-file")); // a required flag satisfied by the file
        assert_eq!(listen, "127.0.0.1:8480"); // built-in default
        assert_eq!((hb, factor, prefix), (30, 2.5, true));
        let (_, dir, _, hb, _, _) = serve(
            parse(
                &[
                    "c",
                    "serve",
                    "--data-dir",
                    "/srv/flag",
                    "--heartbeat-s",
                    "45",
                ],
                Some(f.path()),
            )
            .unwrap(),
        );
        assert_eq!((dir, hb), (PathBuf::from("/srv/flag"), 45));
    }

    #[test]
    fn the_environment_beats_the_file() {
        let f = write("data_dir = \"/srv/a\"\nlisten = \"127.0.0.1:9001\"\n");
        let (_, _, listen, _, _, _) = serve(
            parse_with_env(
                &["c", "serve"],
                Some(f.path()),
                &[("T_LISTEN", "127.0.0.1:9002")],
            )
            .unwrap(),
        );
        assert_eq!(listen, "127.0.0.1:9002");
        let (_, _, listen, _, _, _) = serve(
            parse(
                &["c", "serve", "--listen", "127.0.0.1:9003"],
                Some(f.path()),
            )
            .unwrap(),
        );
        assert_eq!(listen, "127.0.0.1:9003");
    }

    #[test]
    fn the_file_is_found_by_flag_or_environment_after_the_subcommand() {
        let none = env_of(&[]);
        assert_eq!(
            config_path(
                &args(&["c", "serve", "--config", "/etc/a.toml"]),
                "serve",
                &none
            ),
            Some("/etc/a.toml".into())
        );
        assert_eq!(
            config_path(
                &args(&["c", "serve", "--config=/etc/b.toml"]),
                "serve",
                &none
            ),
            Some("/etc/b.toml".into())
        );
        assert_eq!(
            config_path(&args(&["c", "--log-json", "serve"]), "serve", &none),
            None
        );
        let env = env_of(&[(CONFIG_ENV, "/etc/c.toml")]);
        assert_eq!(
            config_path(&args(&["c", "serve"]), "serve", &env),
            Some("/etc/c.toml".into())
        );
        // Other subcommands are not configured by the file.
        assert_eq!(
            config_path(
                &args(&["c", "init", "--config", "/etc/a.toml"]),
                "serve",
                &env
            ),
            None
        );
        // The flag beats the environment.
        assert_eq!(
            config_path(
                &args(&["c", "serve", "--config", "/etc/a.toml"]),
                "serve",
                &env
            ),
            Some("/etc/a.toml".into())
        );
        let f = write("data_dir = \"/srv/z\"\n");
        let p = f.path().to_str().unwrap();
        let cmd = apply_to(
            Cli::command(),
            "serve",
            &args(&["c", "serve", "--config", p]),
            &none,
        )
        .unwrap();
        let m = cmd
            .try_get_matches_from(args(&["c", "serve", "--config", p]))
            .unwrap();
        assert_eq!(
            serve(Cli::from_arg_matches(&m).unwrap()).1,
            PathBuf::from("/srv/z")
        );
    }

    #[test]
    fn bad_files_are_refused_naming_file_and_key() {
        let cases: &[(&str, &[&str])] = &[
            (
                "data_dir = \"/a\"\nheartbeat = 30\n",
                &["unknown key `heartbeat`", "heartbeat_s"],
            ),
            ("heartbeat_s = \"soon\"\n", &["heartbeat_s", "soon"]),
            ("heartbeat_s = -5\n", &["heartbeat_s"]),
            ("distinct_prefix = 1\n", &["distinct_prefix = true"]),
            (
                "listen = [1, 2]\n",
                &["`listen` takes one string or number"],
            ),
            ("config = \"/x\"\n", &["unknown key `config`"]),
            ("heartbeat_s = \n", &["not valid TOML"]),
        ];
        for (text, needles) in cases {
            let f = write(text);
            let e = apply_file(Cli::command(), "serve", f.path())
                .unwrap_err()
                .to_string();
            assert!(e.contains(f.path().to_str().unwrap()), "{e}");
            for n in *needles {
                assert!(e.contains(n), "{text:?}: {e:?} lacks {n:?}");
            }
        }
        let e = apply_file(Cli::command(), "serve", Path::new("/nonexistent/c.toml"))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("/nonexistent/c.toml") && e.contains("--config"),
            "{e}"
        );
        let big = write(&format!("# {}\n", "x".repeat(MAX_FILE_BYTES as usize)));
        assert!(matches!(
            apply_file(Cli::command(), "serve", big.path()),
            Err(ConfigFileError::TooLarge { .. })
        ));
    }

    #[test]
    fn without_a_file_nothing_changes() {
        assert!(parse(&["c", "serve"], None)
            .unwrap_err()
            .contains("--data-dir"));
        let (_, dir, _, hb, _, _) =
            serve(parse(&["c", "serve", "--data-dir", "/d"], None).unwrap());
        assert_eq!((dir, hb), (PathBuf::from("/d"), 60));
    }
}

//! deploy/ kept true to the binary: the example configuration names exactly the variables
//! `loopbal serve --help` shows, with the defaults it shows; the systemd unit runs
//! `loopbal serve` with that configuration; the container image runs as a non-root user with
//! the database on a volume. Plain files and the real binary's help: no network, no docker.

use std::collections::{BTreeMap, BTreeSet};
use std::path::PathBuf;
use std::process::Command;

const BIN: &str = env!("CARGO_BIN_EXE_loopbal");

fn deploy_file(name: &str) -> String {
    let path: PathBuf = [env!("CARGO_MANIFEST_DIR"), "..", "deploy", name]
        .iter()
        .collect();
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("reading {}: {e}", path.display()))
}

/// One `serve` option as clap's help shows it: its variable and its default, if any.
#[derive(Debug)]
struct HelpOption {
    entry: String,
    env: String,
    default: Option<String>,
}

/// The options of `loopbal serve --help` that have an `[env: NAME=...]` marker. The
/// environment is cleared first: clap shows a variable's current value in its marker.
fn serve_options() -> Vec<HelpOption> {
    let out = Command::new(BIN)
        .args(["serve", "--help"])
        .env_clear()
        .output()
        .expect("running loopbal serve --help");
    assert!(out.status.success(), "loopbal serve --help failed: {out:?}");
    let help = String::from_utf8(out.stdout).expect("help is UTF-8");
    let options = help
        .split_once("Options:")
        .unwrap_or_else(|| panic!("no Options: section in\n{help}"))
        .1;

    // An entry starts at a line whose text starts with `-`; wrapped lines continue it.
    let mut entries: Vec<String> = Vec::new();
    for line in options.lines() {
        let text = line.trim();
        if text.starts_with('-') {
            entries.push(text.to_string());
        } else if let (Some(last), false) = (entries.last_mut(), text.is_empty()) {
            last.push(' ');
            last.push_str(text);
        }
    }

    let mut found = Vec::new();
    for entry in entries {
        let Some(env) = marker(&entry, "env") else {
            continue;
        };
        let (name, value) = env
            .split_once('=')
            .unwrap_or_else(|| panic!("no `=` in the env marker of {entry:?}"));
        assert!(
            value.is_empty(),
            "the environment was cleared, yet {entry:?}"
        );
        found.push(HelpOption {
            env: name.to_string(),
            default: marker(&entry, "default"),
            entry,
        });
    }
    assert!(
        found.len() >= 5,
        "too few [env: ...] markers found; did clap's help format change?\n{help}"
    );
    found
}

/// The text of clap's `[KIND: TEXT]` marker in one help entry. A marker ends at the `]` that
/// ends the entry or precedes the next marker, so a text holding `]` (`[::]:8080`) is whole.
fn marker(entry: &str, kind: &str) -> Option<String> {
    let open = format!("[{kind}: ");
    let start = entry.find(&open)? + open.len();
    let rest = &entry[start..];
    let end = rest
        .match_indices(']')
        .map(|(i, _)| i)
        .find(|&i| {
            let after = &rest[i + 1..];
            after.trim().is_empty() || after.starts_with(" [")
        })
        .unwrap_or_else(|| panic!("unterminated [{kind}: ...] in {entry:?}"));
    Some(rest[..end].to_string())
}

/// `RUST_LOG`'s default is not a clap option: it is the filter `serve::init_tracing` falls
/// back to, read here from its source.
fn rust_log_default() -> String {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/src/serve.rs");
    let source = std::fs::read_to_string(path).expect("reading server/src/serve.rs");
    let open = "EnvFilter::new(\"";
    let start = source.find(open).unwrap_or_else(|| {
        panic!(
            "no `EnvFilter::new(\"...\")` in {path}: update rust_log_default() in tests/deploy.rs"
        )
    }) + open.len();
    let len = source[start..].find('"').expect("an unterminated string");
    source[start..start + len].to_string()
}

/// A setting of deploy/loopbal.env: its value, whether it is commented out, and the comment
/// paragraph just above it.
struct Setting {
    value: String,
    commented: bool,
    comment: String,
}

/// The file's convention: a setting is `NAME=VALUE` or `#NAME=VALUE` (no space after `#`);
/// a comment line starts with `# ` or is a bare `#`.
fn env_file_settings() -> BTreeMap<String, Setting> {
    let text = deploy_file("loopbal.env");
    let mut settings = BTreeMap::new();
    let mut comment = String::new();
    for (number, line) in text.lines().enumerate() {
        let (commented, body) = match line.strip_prefix('#') {
            Some(rest) => (true, rest),
            None => (false, line),
        };
        let setting = body.split_once('=').filter(|(name, _)| {
            !name.is_empty()
                && name
                    .chars()
                    .all(|c| c.is_ascii_uppercase() || c.is_ascii_digit() || c == '_')
        });
        match setting {
            Some((name, value)) => {
                let old = settings.insert(
                    name.to_string(),
                    Setting {
                        value: value.to_string(),
                        commented,
                        comment: std::mem::take(&mut comment),
                    },
                );
                assert!(
                    old.is_none(),
                    "loopbal.env line {}: {name} again",
                    number + 1
                );
            }
            None if line.trim().is_empty() => comment.clear(),
            None => {
                assert!(
                    line == "#" || line.starts_with("# "),
                    "loopbal.env line {}: neither a setting nor a comment: {line:?}",
                    number + 1
                );
                comment.push_str(line);
                comment.push('\n');
            }
        }
    }
    settings
}

#[test]
fn the_example_configuration_names_every_serve_setting_with_its_default() {
    let options = serve_options();
    let settings = env_file_settings();

    let mut expected: BTreeSet<String> = options.iter().map(|o| o.env.clone()).collect();
    expected.insert("RUST_LOG".to_string());
    let named: BTreeSet<String> = settings.keys().cloned().collect();
    assert_eq!(
        named, expected,
        "deploy/loopbal.env must name exactly the variables of `loopbal serve --help` and RUST_LOG"
    );

    for option in &options {
        let setting = &settings[&option.env];
        match &option.default {
            Some(default) => assert_eq!(
                &setting.value, default,
                "{}: loopbal.env shows {:?}, clap's default is {default:?} ({})",
                option.env, setting.value, option.entry
            ),
            None => assert!(
                setting.value.is_empty(),
                "{} has no default in clap, so loopbal.env shows no value (got {:?})",
                option.env,
                setting.value
            ),
        }
    }
    assert_eq!(
        settings["RUST_LOG"].value,
        rust_log_default(),
        "RUST_LOG's default"
    );

    for (name, setting) in &settings {
        // Commented out, the file changes nothing as shipped: in particular `docker run
        // --env-file` does not undo the image's LOOPBAL_LISTEN and LOOPBAL_DATABASE_URL.
        assert!(
            setting.commented,
            "{name} is set in loopbal.env; ship it as `#{name}=...`"
        );
        assert!(
            setting.comment.contains("Default"),
            "{name} needs a comment above it saying what it does, its unit and its default"
        );
    }
}

/// The `[Service]` section of deploy/loopbal.service as (key, value) pairs in order.
fn unit_service_section() -> Vec<(String, String)> {
    let text = deploy_file("loopbal.service");
    let mut section = String::new();
    let mut pairs = Vec::new();
    for line in text.lines().map(str::trim) {
        if line.is_empty() || line.starts_with('#') || line.starts_with(';') {
            continue;
        }
        if line.starts_with('[') {
            section = line.to_string();
        } else if section == "[Service]" {
            let (key, value) = line
                .split_once('=')
                .unwrap_or_else(|| panic!("loopbal.service: not a key=value line: {line:?}"));
            pairs.push((key.trim().to_string(), value.trim().to_string()));
        }
    }
    pairs
}

fn unit_values<'a>(pairs: &'a [(String, String)], key: &str) -> Vec<&'a str> {
    pairs
        .iter()
        .filter(|(k, _)| k == key)
        .map(|(_, v)| v.as_str())
        .collect()
}

fn unit_value<'a>(pairs: &'a [(String, String)], key: &str) -> &'a str {
    match unit_values(pairs, key).as_slice() {
        [one] => one,
        other => panic!("loopbal.service: expected one {key}=, found {other:?}"),
    }
}

#[test]
fn the_systemd_unit_runs_serve_with_the_example_configuration() {
    let service = unit_service_section();

    // `ExecStart=[prefixes]/path/to/loopbal serve`, with no option that would override the
    // environment file.
    let exec = unit_value(&service, "ExecStart").trim_start_matches(['@', '-', ':', '+', '!']);
    let words: Vec<&str> = exec.split_whitespace().collect();
    assert!(
        words.len() == 2 && words[0].rsplit('/').next() == Some("loopbal") && words[1] == "serve",
        "ExecStart must run `loopbal serve` alone, got {exec:?}"
    );

    let env_file = unit_value(&service, "EnvironmentFile").trim_start_matches('-');
    assert_eq!(env_file, "/etc/loopbal/loopbal.env");

    let user = unit_value(&service, "User");
    assert!(
        user != "root" && user != "0",
        "the unit must not run as root"
    );

    // The database lives in the state directory, the only writable path.
    let state = format!("/var/lib/{}", unit_value(&service, "StateDirectory"));
    assert_eq!(unit_value(&service, "ReadWritePaths"), state);
    let database = unit_values(&service, "Environment")
        .iter()
        .flat_map(|v| v.split_whitespace())
        .find_map(|kv| kv.strip_prefix("LOOPBAL_DATABASE_URL="))
        .expect("Environment=LOOPBAL_DATABASE_URL=... in the unit");
    assert!(
        database.starts_with(&format!("{state}/")),
        "the database {database} is outside {state}"
    );
    assert_eq!(unit_value(&service, "ProtectSystem"), "strict");
    assert_eq!(unit_value(&service, "CapabilityBoundingSet"), "");

    // A graceful stop waits for requests in flight, each of which may take up to the request
    // timeout: systemd must wait longer than that before SIGKILL.
    assert_eq!(unit_value(&service, "KillSignal"), "SIGTERM");
    let stop = unit_value(&service, "TimeoutStopSec");
    let stop: u64 = stop
        .strip_suffix('s')
        .unwrap_or(stop)
        .parse()
        .unwrap_or_else(|_| panic!("TimeoutStopSec={stop}: write it in seconds"));
    let request_timeout: u64 = serve_options()
        .iter()
        .find(|o| o.env == "LOOPBAL_REQUEST_TIMEOUT")
        .and_then(|o| o.default.as_deref())
        .expect("LOOPBAL_REQUEST_TIMEOUT's default")
        .parse()
        .expect("a number of seconds");
    assert!(
        stop > request_timeout,
        "TimeoutStopSec={stop} must exceed the request timeout ({request_timeout} s)"
    );
}

/// The instructions of the Dockerfile's last stage (the runtime image): continuation lines
/// joined, comments dropped, as (INSTRUCTION, arguments).
fn runtime_stage() -> Vec<(String, String)> {
    let text = deploy_file("Dockerfile");
    let mut instructions: Vec<(String, String)> = Vec::new();
    let mut pending = String::new();
    for line in text.lines() {
        let trimmed = line.trim();
        // Comments (and parser directives) are dropped, also inside a continued instruction.
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        match trimmed.strip_suffix('\\') {
            Some(part) => {
                pending.push_str(part);
                pending.push(' ');
            }
            None => {
                pending.push_str(trimmed);
                let (word, args) = pending
                    .split_once(char::is_whitespace)
                    .unwrap_or((&pending, ""));
                instructions.push((word.to_ascii_uppercase(), args.trim().to_string()));
                pending.clear();
            }
        }
    }
    let last_from = instructions
        .iter()
        .rposition(|(word, _)| word == "FROM")
        .expect("a FROM in deploy/Dockerfile");
    assert!(last_from > 0, "deploy/Dockerfile must be multi-stage");
    assert!(
        instructions[..last_from]
            .iter()
            .any(|(w, a)| w == "FROM" && a.contains(" AS ")),
        "deploy/Dockerfile: the build stage must be named"
    );
    instructions.split_off(last_from)
}

/// `${NAME}` and `$NAME` replaced by the stage's ARG and ENV values.
fn substitute(text: &str, vars: &BTreeMap<String, String>) -> String {
    let mut out = text.to_string();
    for (name, value) in vars {
        out = out.replace(&format!("${{{name}}}"), value);
        out = out.replace(&format!("${name}"), value);
    }
    out
}

#[test]
fn the_container_runs_as_a_non_root_user_with_the_database_on_a_volume() {
    let stage = runtime_stage();
    let mut vars = BTreeMap::new();
    let mut env = BTreeMap::new();
    for (word, args) in &stage {
        if word == "ARG" || word == "ENV" {
            for pair in args.split_whitespace() {
                if let Some((k, v)) = pair.split_once('=') {
                    let v = v.trim_matches('"').to_string();
                    vars.insert(k.to_string(), v.clone());
                    if word == "ENV" {
                        env.insert(k.to_string(), v);
                    }
                }
            }
        }
    }
    let last = |name: &str| {
        stage
            .iter()
            .rev()
            .find(|(w, _)| w == name)
            .map(|(_, a)| substitute(a, &vars))
            .unwrap_or_else(|| panic!("no {name} in the Dockerfile's runtime stage"))
    };

    let user = last("USER");
    let uid = user.split(':').next().unwrap_or_default();
    assert!(
        !uid.is_empty() && uid != "root" && uid != "0",
        "the runtime stage must run as a non-root user, got USER {user}"
    );

    let volume = last("VOLUME");
    assert!(volume.contains("/var/lib/loopbal"), "VOLUME {volume}");
    assert_eq!(
        env.get("LOOPBAL_DATABASE_URL").map(String::as_str),
        Some("/var/lib/loopbal/loopbal.sqlite"),
        "the database must be on the volume"
    );

    // Every variable the image sets is one `loopbal serve` reads, so a renamed option is noticed.
    let known: BTreeSet<String> = serve_options().into_iter().map(|o| o.env).collect();
    for name in env.keys().filter(|k| k.starts_with("LOOPBAL_")) {
        assert!(
            known.contains(name),
            "the Dockerfile sets {name}, which loopbal serve does not read"
        );
    }
    let listen = env
        .get("LOOPBAL_LISTEN")
        .expect("ENV LOOPBAL_LISTEN in the runtime stage");
    let port = listen.rsplit(':').next().unwrap_or_default();
    assert_eq!(last("EXPOSE"), port, "EXPOSE and LOOPBAL_LISTEN's port");

    assert!(
        last("HEALTHCHECK").contains("/healthz"),
        "HEALTHCHECK must ask /healthz"
    );
    assert_eq!(last("STOPSIGNAL"), "SIGTERM");
    assert_eq!(last("ENTRYPOINT"), r#"["loopbal"]"#);
    assert_eq!(last("CMD"), r#"["serve"]"#);
}

//! `loopbal serve`'s options checked before anything starts: a run time limit (`--run-timeout`,
//! `LOOPBAL_RUN_TIMEOUT`) of zero, beyond a day or not a number is exit status 2 with a message
//! naming the option, and `--help` says the default rule.

use std::process::Command;

use super::{loopbal, stderr, support};

#[test]
fn a_run_timeout_of_zero_or_junk_is_refused_naming_the_option() {
    for value in ["0", "-5", "soon", "1.5", "86401", ""] {
        // `=`, so that `-5` is a value, not a flag.
        let out = loopbal(&["serve", &format!("--run-timeout={value}")]);
        assert_eq!(
            out.status.code(),
            Some(2),
            "--run-timeout {value:?}: {out:?}"
        );
        let err = stderr(&out);
        assert!(
            err.contains("--run-timeout <SECONDS>") && err.contains(&format!("'{value}'")),
            "--run-timeout {value:?}: {err}"
        );
    }
    // The same value in the variable is refused the same way, naming the option.
    let out = Command::new(support::BIN)
        .arg("serve")
        .env("LOOPBAL_RUN_TIMEOUT", "0")
        .output()
        .expect("the loopbal binary runs");
    assert_eq!(out.status.code(), Some(2), "{out:?}");
    assert!(
        stderr(&out).contains("--run-timeout <SECONDS>"),
        "{}",
        stderr(&out)
    );
}

#[test]
fn the_help_says_the_default_run_timeout() {
    let out = loopbal(&["serve", "--help"]);
    assert!(out.status.success(), "{out:?}");
    let help = String::from_utf8_lossy(&out.stdout);
    let entry = help
        .split_once("--run-timeout <SECONDS>")
        .unwrap_or_else(|| panic!("no --run-timeout in\n{help}"))
        .1;
    let entry = entry.split("\n  -").next().unwrap_or_default();
    let entry = entry.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(
        entry.contains("3 s per 100 states and at least 5 s")
            && entry.contains("[env: LOOPBAL_RUN_TIMEOUT=]"),
        "{entry}"
    );
}

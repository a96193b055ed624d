//! The README cannot rot: every `cargo run -p sinew -- ...` and `sinew ...` command in its shell
//! blocks (the quick start and the walk-through) runs here, in order, with the `sinew` binary of this build,
//! and must succeed. The quick start's other command, `cargo test --workspace`, is this suite.

use std::path::Path;
use std::process::Command;

/// Every shell command line of the README's ```sh blocks, comments removed.
fn shell_commands(readme: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut in_sh = false;
    for line in readme.lines() {
        let t = line.trim();
        if t.starts_with("```") {
            in_sh = !in_sh && t == "```sh";
            continue;
        }
        if in_sh {
            let cmd = t.split(" #").next().unwrap_or("").trim();
            if !cmd.is_empty() {
                out.push(cmd.to_string());
            }
        }
    }
    out
}

#[test]
fn every_readme_command_runs() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let readme = std::fs::read_to_string(root.join("README.md")).unwrap();
    let commands = shell_commands(&readme);
    assert!(
        commands.iter().any(|c| c == "cargo test --workspace"),
        "the quick start names the test command"
    );
    // The walk-through installs the command before it uses it bare.
    let install = commands
        .iter()
        .position(|c| c == "cargo install --path compiler");
    let first_bare = commands.iter().position(|c| c.starts_with("sinew "));
    assert!(
        matches!((install, first_bare), (Some(i), Some(b)) if i < b),
        "`cargo install --path compiler` comes before the first bare `sinew` command"
    );
    let mut ran = 0;
    for cmd in &commands {
        // `cargo run ... -p sinew -- ARGS` (the quick start) or `sinew ARGS` (the walk-through,
        // after `cargo install --path compiler`): both run this build's binary.
        let args = match (cmd.split_once("-p sinew -- "), cmd.strip_prefix("sinew ")) {
            (Some((_, args)), _) | (None, Some(args)) => args,
            (None, None) => {
                assert!(
                    cmd.starts_with("cargo test") || cmd == "cargo install --path compiler",
                    "unexpected README command: {cmd}"
                );
                continue;
            }
        };
        let args: Vec<&str> = args.split_whitespace().collect();
        let o = Command::new(env!("CARGO_BIN_EXE_sinew"))
            .args(&args)
            .current_dir(&root)
            .output()
            .unwrap();
        assert!(
            o.status.success(),
            "README command failed: {cmd}\n{}{}",
            String::from_utf8_lossy(&o.stdout),
            String::from_utf8_lossy(&o.stderr)
        );
        ran += 1;
    }
    assert!(ran >= 6, "ran {ran} README commands");
}

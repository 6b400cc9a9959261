//! The shape of the house, checked: which modules of the crate and which external
//! crates each part of the tree may use. A rule broken here is a design change; make
//! it on purpose (change the table below and DEVELOPERS.md together), never by
//! accident. The core crate's own Cargo.toml is checked too, so that the runtime, the
//! MQTT client, logging and JSON stay out of it.

use std::path::{Path, PathBuf};

/// Every dependency name a source file could mention (as written in Rust paths).
const DEPENDENCIES: &[&str] = &[
    "anyhow",
    "clap",
    "eqwatch_core",
    "nalgebra",
    "prost",
    "ring",
    "rumqttc",
    "rumqttd",
    "rustls",
    "serde",
    "serde_json",
    "thiserror",
    "tokio",
    "tokio_rustls",
    "tokio_util",
    "toml",
    "tracing",
    "tracing_subscriber",
];

/// One part of the tree: the `crate::` modules and the external crates it may use.
struct Rule {
    /// File or folder, relative to the repository root.
    path: &'static str,
    modules: &'static [&'static str],
    crates: &'static [&'static str],
}

const CORE_MODULES: &[&str] = &[
    "approach",
    "bedprofile",
    "bedrise",
    "composition",
    "equilibrium",
    "monitor",
    "normalise",
    "reconcile",
    "solve",
    "thermo",
    "timefmt",
    "units",
];

const RULES: &[Rule] = &[
    // The numeric core: itself only; no runtime, network, logging or JSON.
    Rule {
        path: "crates/core/src",
        modules: CORE_MODULES,
        crates: &["thiserror", "serde", "toml", "nalgebra"],
    },
    // The configuration: the core's types, TOML; never the shell.
    Rule {
        path: "src/config",
        modules: &[
            "approach",
            "bedprofile",
            "composition",
            "equilibrium",
            "monitor",
            "normalise",
            "reconcile",
            "thermo",
            "units",
            "config",
        ],
        crates: &["thiserror", "serde", "toml"],
    },
    // SVG charts: numbers and times in, text out.
    Rule {
        path: "src/plot",
        modules: &["timefmt", "units", "plot"],
        crates: &[],
    },
    // Every JSON shape in and out: the core's types and the validated configuration.
    Rule {
        path: "src/wire",
        modules: &[
            "approach",
            "bedprofile",
            "bedrise",
            "composition",
            "config",
            "monitor",
            "thermo",
            "timefmt",
            "units",
            "wire",
        ],
        // prost: the Sparkplug B payload (wire/sparkplug.rs and its generated types).
        crates: &["serde", "serde_json", "thiserror", "prost"],
    },
    // The processing path: route, decode, monitor, watch, commands. No runtime, no
    // MQTT client, no files (logs through the tracing facade only).
    Rule {
        path: "src/pipeline",
        modules: &["config", "monitor", "timefmt", "units", "wire", "pipeline"],
        crates: &["tracing", "serde_json", "thiserror"],
    },
    // History through the pipeline: CSV in, JSON lines and plots out. No runtime.
    Rule {
        path: "src/replay",
        modules: &[
            "cli",
            "composition",
            "config",
            "equilibrium",
            "monitor",
            "pipeline",
            "plot",
            "timefmt",
            "units",
            "wire",
            "replay",
        ],
        crates: &["thiserror", "tracing", "serde_json"],
    },
    // The shell: tasks, clock, MQTT link, outbox, journal, HTTP. Never the demo, the
    // replay, the calculator or the charts.
    Rule {
        path: "src/daemon",
        modules: &[
            "approach", "config", "monitor", "pipeline", "timefmt", "units", "wire", "web",
            "daemon",
        ],
        // rustls and tokio_rustls: TLS for both links (mqtt.rs builds the client
        // configuration; publink.rs, the result link's own client, connects with it).
        crates: &[
            "tokio",
            "tokio_util",
            "rumqttc",
            "rustls",
            "tokio_rustls",
            "tracing",
            "serde",
            "serde_json",
            "thiserror",
        ],
    },
    // The live page and its pure parts (what it shows, logins and sessions, requests):
    // the configuration's users, the wire module's advisory and command shape, time
    // helpers; ring for PBKDF2 and random tokens. No runtime, no sockets, no clock: the
    // daemon serves it.
    Rule {
        path: "src/web",
        modules: &["config", "timefmt", "units", "wire", "web"],
        crates: &["ring", "serde", "serde_json", "thiserror"],
    },
    // The invented plant: the core's models (its tests read the demo configuration).
    Rule {
        path: "src/demo/sim.rs",
        modules: &[
            "approach",
            "composition",
            "equilibrium",
            "thermo",
            "timefmt",
            "units",
        ],
        crates: &["serde_json", "toml"],
    },
    // The demo runner, embedded broker and proxy: the top of the house, above the
    // daemon; nothing below may use it.
    Rule {
        path: "src/demo",
        modules: &[
            "cli", "config", "daemon", "monitor", "plot", "replay", "timefmt", "units", "demo",
        ],
        crates: &[
            "tokio",
            "tokio_util",
            "rumqttc",
            "rumqttd",
            "tracing",
            "serde_json",
            "thiserror",
        ],
    },
    // Entry points for the fuzz targets (feature `fuzzing`): the front doors of the
    // pipeline, the configuration and replay; no daemon.
    Rule {
        path: "src/fuzz.rs",
        // wire: the Sparkplug B consumer (pure), fuzzed on its own.
        modules: &["config", "pipeline", "replay", "plot", "wire"],
        crates: &[],
    },
    // The period's report, pure: records (JSON) in, HTML with the charts out. No files or
    // clock (the command reads them), no configuration (it is handed the reactors), no
    // pipeline or daemon: it reads what was published, not how it was made.
    Rule {
        path: "src/report",
        modules: &["plot", "timefmt", "units", "report"],
        // serde: the records are read keeping only the fields the report uses
        // (record.rs: a seed and visitor over serde_json's parser), not as a whole tree.
        crates: &["serde", "serde_json", "thiserror"],
    },
    // `eqwatch report`: reads the file and the configuration, hands lines to the report.
    Rule {
        path: "src/cli/report.rs",
        modules: &["cli", "config", "report", "timefmt"],
        crates: &["thiserror"],
    },
    // The calculator: the core and JSON; no daemon.
    Rule {
        path: "src/cli",
        modules: &[
            "approach",
            "composition",
            "equilibrium",
            "reconcile",
            "thermo",
            "units",
            "cli",
        ],
        crates: &["serde_json", "thiserror"],
    },
];

/// `crate::x` module names and external crate names used in one file's code
/// (comments and doc comments left out).
fn uses(text: &str) -> (Vec<String>, Vec<String>) {
    let mut modules = Vec::new();
    let mut crates = Vec::new();
    for line in text.lines() {
        let code = match line.find("//") {
            Some(i) => &line[..i],
            None => line,
        };
        let mut rest = code;
        while let Some(i) = rest.find("crate::") {
            let after = &rest[i + "crate::".len()..];
            let name: String = after
                .chars()
                .take_while(|c| c.is_ascii_alphanumeric() || *c == '_')
                .collect();
            // `eqwatch_core::` ends in `core::`, not `crate::`; a `crate::{a, b}` group
            // names its modules inside the braces.
            if name.is_empty() && after.starts_with('{') {
                let group = after[1..].split('}').next().unwrap_or("");
                for part in group.split(',') {
                    let m: String = part
                        .trim()
                        .chars()
                        .take_while(|c| c.is_ascii_alphanumeric() || *c == '_')
                        .collect();
                    if !m.is_empty() {
                        modules.push(m);
                    }
                }
            } else if !name.is_empty() {
                modules.push(name);
            }
            rest = after;
        }
        for dep in DEPENDENCIES {
            let mentioned = code.match_indices(dep).any(|(i, _)| {
                let before = code[..i].chars().next_back();
                let after = &code[i + dep.len()..];
                let starts =
                    before.is_none_or(|c| !(c.is_ascii_alphanumeric() || c == '_' || c == ':'));
                starts && (after.starts_with("::") || after.starts_with(';'))
            });
            if mentioned {
                crates.push((*dep).to_string());
            }
        }
    }
    (modules, crates)
}

/// Every rule broken by one file, in words.
fn broken(rule: &Rule, file: &str, text: &str) -> Vec<String> {
    let (modules, crates) = uses(text);
    let mut out = Vec::new();
    for m in modules {
        if !rule.modules.contains(&m.as_str()) {
            out.push(format!(
                "{file}: uses crate::{m}, which {} may not",
                rule.path
            ));
        }
    }
    for c in crates {
        if !rule.crates.contains(&c.as_str()) {
            out.push(format!(
                "{file}: uses the crate {c}, which {} may not",
                rule.path
            ));
        }
    }
    out.sort();
    out.dedup();
    out
}

fn rust_files(path: &Path, out: &mut Vec<PathBuf>) {
    if path.is_file() {
        out.push(path.to_path_buf());
        return;
    }
    let Ok(entries) = std::fs::read_dir(path) else {
        return;
    };
    for e in entries.flatten() {
        let p = e.path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// Files with no rule: the crate roots, which only declare modules and wire commands.
const ROOTS: &[&str] = &["src/lib.rs", "src/main.rs", "crates/core/src/lib.rs"];

/// The most specific rule for a file (`src/demo/sim.rs` before `src/demo`).
fn rule_for(file: &str) -> Option<&'static Rule> {
    RULES
        .iter()
        .filter(|r| {
            file == r.path
                || file == format!("{}.rs", r.path)
                || file.starts_with(&format!("{}/", r.path))
        })
        .max_by_key(|r| r.path.len())
}

#[test]
fn every_part_of_the_tree_keeps_to_its_imports() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut files = Vec::new();
    rust_files(&root.join("src"), &mut files);
    rust_files(&root.join("crates/core/src"), &mut files);
    let mut problems = Vec::new();
    let mut covered = vec![false; RULES.len()];
    for f in files {
        let name = f.strip_prefix(root).unwrap_or(&f).display().to_string();
        if ROOTS.contains(&name.as_str()) {
            continue;
        }
        let Some(rule) = rule_for(&name) else {
            problems.push(format!(
                "{name}: no rule covers this file; add one to RULES"
            ));
            continue;
        };
        if let Some(i) = RULES.iter().position(|r| std::ptr::eq(r, rule)) {
            covered[i] = true;
        }
        let text = std::fs::read_to_string(&f).expect("source file is UTF-8");
        problems.extend(broken(rule, &name, &text));
    }
    for (rule, seen) in RULES.iter().zip(covered) {
        if !seen {
            problems.push(format!(
                "{}: a rule with no files; update the rules",
                rule.path
            ));
        }
    }
    assert!(
        problems.is_empty(),
        "house rules broken:\n{}",
        problems.join("\n")
    );
}

#[test]
fn a_file_gets_the_most_specific_rule() {
    let path = |f: &str| rule_for(f).map(|r| r.path);
    assert_eq!(path("src/demo/sim.rs"), Some("src/demo/sim.rs"));
    assert_eq!(path("src/demo/runner.rs"), Some("src/demo"));
    assert_eq!(path("src/plot.rs"), Some("src/plot"));
    assert_eq!(path("src/plot/axes.rs"), Some("src/plot"));
    assert_eq!(path("src/plotter.rs"), None);
    assert_eq!(path("src/new_room/mod.rs"), None);
}

#[test]
fn the_core_crate_depends_on_no_runtime_client_logging_or_json() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let manifest =
        std::fs::read_to_string(root.join("crates/core/Cargo.toml")).expect("core manifest");
    let deps = manifest
        .split("[dependencies]")
        .nth(1)
        .and_then(|s| s.split("\n[").next())
        .expect("a [dependencies] table");
    for line in deps.lines().map(str::trim) {
        if line.starts_with('#') || line.is_empty() {
            continue;
        }
        let name = line.split(['=', ' ']).next().unwrap_or("");
        assert!(
            ["thiserror", "serde", "toml", "nalgebra"].contains(&name),
            "crates/core depends on {name}; the core takes no runtime, MQTT, logging or JSON"
        );
    }
}

#[test]
fn the_checker_catches_a_broken_rule() {
    // A core file that reached for the configuration, tokio and serde_json.
    let rule = &RULES[0];
    let text = "use crate::config::Settings;\nuse crate::{units, daemon};\nfn f() { tokio::spawn(async {}); let _ = serde_json::json!({}); }\n// crate::plot in a comment is fine\n";
    let found = broken(rule, "x.rs", text);
    assert_eq!(
        found,
        [
            "x.rs: uses crate::config, which crates/core/src may not",
            "x.rs: uses crate::daemon, which crates/core/src may not",
            "x.rs: uses the crate serde_json, which crates/core/src may not",
            "x.rs: uses the crate tokio, which crates/core/src may not",
        ]
    );
    // The same file's allowed uses pass.
    assert!(
        broken(
            rule,
            "y.rs",
            "use crate::units::duration_ms;\nuse thiserror::Error;\n"
        )
        .is_empty()
    );
}

#[test]
fn every_reason_code_is_explained_in_the_readme() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let readme = std::fs::read_to_string(root.join("README.md")).expect("README.md");
    let missing: Vec<&str> = eqwatch::monitor::ReasonCode::ALL
        .iter()
        .map(|c| c.as_str())
        .filter(|c| !readme.contains(&format!("`{c}`")))
        .collect();
    assert!(missing.is_empty(), "README lacks reason codes: {missing:?}");
}

//! The journal on a full or unwritable disk (a 2 MiB tmpfs mounted by the test; needs
//! root, as CI runs). The promise: results keep being published from a bounded memory
//! buffer while the journal cannot be written, readiness says so, one error is logged
//! (not one per result), and when space returns what was held is written to the journal.
//! A journal folder that cannot be written refuses the start.

use std::path::Path;
use std::process::Command;
use std::time::{Duration, Instant};

use crate::support::*;

/// A tmpfs of `size` mounted on `dir`, unmounted when dropped.
struct Tmpfs(std::path::PathBuf);

impl Tmpfs {
    fn mount(dir: &Path, options: &str) -> Option<Self> {
        std::fs::create_dir_all(dir).unwrap();
        let ok = Command::new("mount")
            .args(["-t", "tmpfs", "-o", options, "tmpfs"])
            .arg(dir)
            .status()
            .is_ok_and(|s| s.success());
        ok.then(|| Tmpfs(dir.to_path_buf()))
    }
}

impl Drop for Tmpfs {
    fn drop(&mut self) {
        let _ = Command::new("umount").arg("-l").arg(&self.0).status();
    }
}

/// Fills the file system of `dir` until at most `leave` bytes are free.
fn fill(dir: &Path, leave: u64) -> std::path::PathBuf {
    use std::io::Write as _;
    let path = dir.join("filler");
    let mut f = std::fs::File::create(&path).unwrap();
    let chunk = vec![0u8; 4096];
    let mut written = 0u64;
    // 2 MiB less what is left free, in 4 KiB pages.
    while written + leave < 2 * 1024 * 1024 && f.write_all(&chunk).is_ok() {
        written += chunk.len() as u64;
    }
    let _ = f.sync_all();
    path
}

fn journal_lines(dir: &Path, topic: &str) -> usize {
    let mut n = 0;
    for e in std::fs::read_dir(dir).unwrap().flatten() {
        let name = e.file_name().to_string_lossy().to_string();
        if name.starts_with("eqwatch-") && name.ends_with(".jsonl") {
            let text = std::fs::read_to_string(e.path()).unwrap_or_default();
            n += text
                .lines()
                .filter(|l| l.contains(&format!("\"topic\":\"{topic}\"")))
                .count();
        }
    }
    n
}

#[test]
fn a_full_disk_holds_results_in_memory_publishes_them_and_writes_them_when_space_returns() {
    if !is_root() {
        eprintln!("skipped: mounting a tmpfs needs root");
        return;
    }
    let rt = runtime();
    let broker = Mosquitto::start();
    let dir = tempfile::tempdir().unwrap();
    let journal = dir.path().join("journal");
    let Some(_disk) = Tmpfs::mount(&journal, "size=2m") else {
        panic!("could not mount a tmpfs as root");
    };
    let http = free_port();
    let config = write_lts_plant(dir.path(), broker.port, http, "disk", "");
    let got = collector(&rt, broker.port, &["eqwatch/test/#"]);
    let mut d = Daemon::start(&config, http);
    let until = Instant::now() + Duration::from_secs(15);
    while d.metric("eqwatch_broker_connected") != 1.0 && Instant::now() < until {
        std::thread::sleep(Duration::from_millis(100));
    }
    std::thread::sleep(Duration::from_secs(1));
    assert_eq!(http_get(http, "/readyz"), "ready\n");

    // Room for a few results only (each line is a few KB).
    let filler = fill(&journal, 24 * 1024);
    let p = Publisher::new(&rt, broker.port);
    for m in 0..60 {
        publish_lts_set_at(&p, &rt, m);
    }
    assert!(
        wait_for(&got, Duration::from_secs(30), |_| lts_analyses(&got).len()
            >= 60),
        "{} of 60 results published while the journal disk was full",
        lts_analyses(&got).len()
    );
    let held = d.metric("eqwatch_journal_held_records");
    assert!(held > 0.0, "nothing held in memory ({held})");
    let ready = http_get(http, "/readyz");
    assert!(
        ready.contains("journal"),
        "readiness while the disk is full: {ready}"
    );
    let log = std::fs::read_to_string(config.with_extension("log")).unwrap_or_default();
    let errors = log
        .lines()
        .filter(|l| l.contains("ERROR") && l.contains("journal"))
        .count();
    assert_eq!(
        errors, 1,
        "one error line for a full journal, not one per result:\n{log}"
    );

    // Space returns: the held results are written (within the retry interval) and
    // readiness comes back.
    std::fs::remove_file(&filler).unwrap();
    let until = Instant::now() + Duration::from_secs(15);
    while http_get(http, "/readyz") != "ready\n" && Instant::now() < until {
        std::thread::sleep(Duration::from_millis(200));
    }
    assert_eq!(http_get(http, "/readyz"), "ready\n");
    assert_eq!(d.metric("eqwatch_journal_held_records"), 0.0);
    d.signal("-TERM");
    assert_eq!(d.wait_exit(Duration::from_secs(20)), Some(0));
    assert_eq!(
        journal_lines(&journal, "eqwatch/test/lts1/result"),
        60,
        "every result in the journal after space returned"
    );
}

#[test]
fn an_unwritable_journal_folder_refuses_the_start() {
    if !is_root() {
        eprintln!("skipped: mounting a tmpfs needs root");
        return;
    }
    let broker = Mosquitto::start();
    let dir = tempfile::tempdir().unwrap();
    let journal = dir.path().join("journal");
    let Some(_disk) = Tmpfs::mount(&journal, "size=1m,ro") else {
        panic!("could not mount a read-only tmpfs as root");
    };
    let http = free_port();
    let config = write_lts_plant(dir.path(), broker.port, http, "rofs", "");
    let mut child = Command::new(env!("CARGO_BIN_EXE_eqwatch"))
        .args(["run", "--config"])
        .arg(&config)
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let until = Instant::now() + Duration::from_secs(20);
    let code = loop {
        if let Ok(Some(st)) = child.try_wait() {
            break st.code();
        }
        if Instant::now() > until {
            let _ = child.kill();
            let _ = child.wait();
            panic!("the daemon started on a read-only journal folder");
        }
        std::thread::sleep(Duration::from_millis(50));
    };
    let mut stderr = String::new();
    if let Some(mut e) = child.stderr.take() {
        use std::io::Read as _;
        let _ = e.read_to_string(&mut stderr);
    }
    assert_eq!(code, Some(1), "{stderr}");
    assert!(
        stderr.contains(&journal.display().to_string()) && stderr.contains("writ"),
        "the error names the folder and says it cannot be written:\n{stderr}"
    );
}

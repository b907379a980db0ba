//! How a run is executed: the child command line, the resume flag once the engine has it,
//! attempts and the error recorded from the child's output.

use std::os::unix::fs::PermissionsExt;
use std::path::Path;

use interstice_sweep::folder::{self, Exec, RESUME_FLAG, RunState};

/// A stand-in for the `interstice` binary: `run --help` lists (or not) the resume flag, and
/// `run ...` records its arguments and fails like the engine does on a bad scenario.
fn fake_binary(dir: &Path, with_resume: bool) -> std::path::PathBuf {
    let p = dir.join(if with_resume { "interstice-new" } else { "interstice-old" });
    let help =
        if with_resume { format!("      {RESUME_FLAG}  resume from the latest checkpoint") } else { String::new() };
    std::fs::write(
        &p,
        format!(
            "#!/bin/sh\nif [ \"$2\" = --help ]; then echo 'Options:'; echo '  -q, --quiet'; echo '{help}'; exit 0; fi\necho \"$@\" >> \"$(dirname \"$0\")/calls-{with_resume}\"\necho 'error: scenario.toml:2: `run.end_time_h` = -1: expected a finite number in (0, 1e4]' >&2\necho '  caused by: something' >&2\nexit 1\n"
        ),
    )
    .unwrap();
    std::fs::set_permissions(&p, std::fs::Permissions::from_mode(0o755)).unwrap();
    p
}

#[test]
fn resume_flag_is_passed_on_later_attempts_only_when_the_engine_has_it() {
    for with_resume in [false, true] {
        let tmp = tempfile::tempdir().unwrap();
        let root = tmp.path().join("sweep");
        let run_dir = root.join("runs/000000");
        std::fs::create_dir_all(&run_dir).unwrap();
        std::fs::write(run_dir.join("scenario.toml"), "[run]\nname = \"x-000000\"\n").unwrap();
        let bin = fake_binary(tmp.path(), with_resume);
        assert_eq!(folder::resume_supported(&bin), with_resume);
        let exec = Exec { binary: bin, threads: 3, slurm_job: None };
        let run_file = run_dir.join("x-000000.h5");
        for attempt in 1..=2 {
            let state = folder::start(&root, 0, &run_file, &exec).unwrap().wait().unwrap();
            // The engine's error line and its causes become the run's error.
            assert_eq!(
                state,
                RunState::Failed("scenario.toml:2: `run.end_time_h` = -1: expected a finite number in (0, 1e4]; caused by: something".into())
            );
            let st = folder::read_status(&run_dir).unwrap();
            assert_eq!((st.attempt, st.state.as_str(), st.exit.as_deref()), (attempt, "failed", Some("exit code 1")));
        }
        let calls = std::fs::read_to_string(tmp.path().join(format!("calls-{with_resume}"))).unwrap();
        let lines: Vec<&str> = calls.lines().collect();
        let first =
            format!("run {} --out {} --threads 3 --quiet", run_dir.join("scenario.toml").display(), run_dir.display());
        assert_eq!(lines[0], first);
        if with_resume {
            assert_eq!(lines[1], format!("{first} {RESUME_FLAG}"));
        } else {
            assert_eq!(lines[1], first);
        }
    }
}

//! The `arcwright` binary as a user runs it: `decode` on good and malformed input, `conllu check`.

use std::io::Write;
use std::process::{Command, Stdio};

fn run(args: &[&str], stdin: &[u8]) -> (i32, String, String) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_arcwright"))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary starts");
    // A command that rejects its arguments exits without reading its input: a broken pipe here
    // is that, not a failure (the exit code and message are checked by the caller).
    if let Err(e) = child.stdin.take().expect("stdin").write_all(stdin) {
        assert_eq!(e.kind(), std::io::ErrorKind::BrokenPipe, "write stdin: {e}");
    }
    let out = child.wait_with_output().expect("binary finishes");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// Malformed input: exit 2 and a message naming the problem.
fn check_rejected(stdin: &str, args: &[&str], expected: &str) {
    let mut all = vec!["decode"];
    all.extend_from_slice(args);
    let (code, stdout, stderr) = run(&all, stdin.as_bytes());
    assert_eq!(code, 2, "input {stdin:?}: stderr {stderr}");
    assert!(stdout.is_empty(), "nothing on stdout for bad input");
    assert!(
        stderr.contains(expected),
        "input {stdin:?}: stderr {stderr:?} lacks {expected:?}"
    );
}

#[test]
fn decode_rejects_malformed_input_with_exit_code_2() {
    let cases: &[(&str, &str)] = &[
        ("", "not a JSON object"),
        ("nope", "not a JSON object"),
        ("[]", "not a JSON object"),
        ("{}", "missing field `scores`"),
        (
            r#"{"scores": [[0, 1], [0, 0]], "extra": 1}"#,
            "unknown field `extra`",
        ),
        (r#"{"scores": []}"#, "at least one word"),
        (r#"{"scores": [[0]]}"#, "at least one word"),
        (
            r#"{"scores": [[0, 1], [0]]}"#,
            "row 1 has 1 entries; the matrix is 2×2",
        ),
        (
            r#"{"scores": [[0, 1, 2], [0, 0, 1]]}"#,
            "row 0 has 3 entries",
        ),
        (r#"{"scores": [[0, "a"], [0, 0]]}"#, "invalid type: string"),
        (r#"{"scores": [[0, 1e999], [0, 0]]}"#, "number out of range"),
        (r#"{"scores": [[0, null], [0, 0]]}"#, "invalid type: null"),
    ];
    for (stdin, expected) in cases {
        check_rejected(stdin, &[], expected);
    }
    let (code, _, stderr) = run(&["decode", "--decoder", "sideways"], b"{}");
    assert_eq!(code, 2, "{stderr}");
    assert!(stderr.contains("sideways"));
}

#[test]
fn decode_prints_heads_score_and_marginals() {
    // A 3-word matrix whose best single-root tree is 0→1→2→3 (score 5 + 2 + 4 = 11).
    let input = r#"{"scores": [[0,5,1,1],[0,0,2,1],[0,3,0,4],[0,1,2,0]]}"#;
    for algorithm in ["projective", "non-projective"] {
        let (code, stdout, stderr) = run(
            &["decode", "--decoder", algorithm, "--marginals"],
            input.as_bytes(),
        );
        assert_eq!(code, 0, "{stderr}");
        let value: serde_json::Value = serde_json::from_str(&stdout).expect("JSON out");
        assert_eq!(value["heads"], serde_json::json!([0, 1, 2]));
        assert_eq!(value["score"], serde_json::json!(11.0));
        assert!(value["log_partition"].as_f64().expect("log Z") > 11.0);
        let marginals = value["marginals"].as_array().expect("matrix");
        assert_eq!(marginals.len(), 4);
        for m in 1..4 {
            let total: f64 = marginals
                .iter()
                .map(|row| row[m].as_f64().expect("number"))
                .sum();
            assert!((total - 1.0).abs() < 1e-9);
        }
    }
    let (code, stdout, _) = run(&["decode"], input.as_bytes());
    assert_eq!(code, 0);
    assert!(!stdout.contains("marginals"), "marginals only on request");
}

#[test]
fn conllu_check_reports_file_line_and_column() {
    let dir = std::env::temp_dir().join(format!("arcwright-cli-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join("broken.conllu");
    std::fs::write(
        &path,
        "1\ta\t_\tX\t_\t_\t0\troot\t_\t_\n2\tb\t_\tX\t_\t_\tx\tdep\t_\t_\n\n",
    )
    .expect("write");
    let file = path.to_str().expect("utf-8 path");
    let (code, _, stderr) = run(&["conllu", "check", file], b"");
    assert_eq!(code, 2);
    assert!(
        stderr.contains(&format!("{file}:2:7: HEAD: HEAD \"x\" is not a word ID")),
        "{stderr}"
    );
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn serve_rejects_a_bad_settings_file_with_file_and_line() {
    let dir = std::env::temp_dir().join(format!("arcwright-conf-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join("serve.conf");
    std::fs::write(
        &path,
        "# settings\nhttp = \"127.0.0.1:0\"\nmax-tokens = \"many\"\n",
    )
    .expect("write");
    let file = path.to_str().expect("utf-8 path");
    let (code, _, stderr) = run(
        &[
            "serve",
            "--store",
            dir.join("store").to_str().expect("path"),
            "--config",
            file,
        ],
        b"",
    );
    assert_eq!(code, 2, "{stderr}");
    assert!(
        stderr.contains(&format!("{file}:3: max-tokens = \"many\": invalid type")),
        "{stderr}"
    );
    std::fs::write(&path, "colour = \"blue\"\n").expect("write");
    let (code, _, stderr) = run(&["serve", "--config", file], b"");
    assert_eq!(code, 2);
    assert!(
        stderr.contains(&format!("{file}:1: unknown setting \"colour\"")),
        "{stderr}"
    );
    std::fs::remove_dir_all(&dir).ok();
}

//! The `arcwright` binary as a user runs it: `decode` on good and malformed input, `conllu check`,
//! refusals of what makes no sense, and a demo model through train, parse, eval, store and serve.

use std::io::Write;
use std::process::{Command, Stdio};

fn run(args: &[&str], stdin: &[u8]) -> (i32, String, String) {
    run_with_env(args, &[], stdin)
}

/// `run` with extra environment variables.
fn run_with_env(args: &[&str], env: &[(&str, &str)], stdin: &[u8]) -> (i32, String, String) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_arcwright"))
        .args(args)
        .envs(env.iter().copied())
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

/// A scratch directory for one test.
fn scratch(name: &str) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("arcwright-cli-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("scratch dir");
    dir
}

/// Input and requests that make no sense are refused with a message that says what to do,
/// exit code 2, and nothing created on the way.
#[test]
fn nonsense_is_refused_with_what_to_do() {
    let dir = scratch("refusals");
    let path = |p: &str| dir.join(p).display().to_string();
    std::fs::write(dir.join("empty.conllu"), "").expect("write");
    let missing_store = path("no-such-store");
    let cases: Vec<(Vec<String>, &[u8], &str)> = vec![
        (
            vec!["conllu".into(), "check".into()],
            b"",
            "required arguments were not provided",
        ),
        (
            vec![
                "store".into(),
                "list".into(),
                "--store".into(),
                missing_store.clone(),
            ],
            b"",
            "no-such-store",
        ),
        (
            vec![
                "serve".into(),
                "--store".into(),
                missing_store.clone(),
                "--http".into(),
                "127.0.0.1:0".into(),
                "--grpc".into(),
                "127.0.0.1:0".into(),
            ],
            b"",
            "no-such-store",
        ),
    ];
    for (args, stdin, expected) in cases {
        let args: Vec<&str> = args.iter().map(String::as_str).collect();
        let (code, _, stderr) = run(&args, stdin);
        assert_eq!(code, 2, "{args:?}: {stderr}");
        assert!(stderr.contains(expected), "{args:?}: {stderr}");
    }
    assert!(
        !dir.join("no-such-store").exists(),
        "a read-only command created the store"
    );
    std::fs::remove_dir_all(&dir).ok();
}

/// Training, evaluation, parsing, pruning and the settings check as a user meets them.
#[test]
fn a_model_from_demo_data_through_the_commands() {
    let dir = scratch("model");
    let path = |p: &str| dir.join(p).display().to_string();
    let (code, demo, stderr) = run(&["demo-data", "--sentences", "300", "--seed", "4"], b"");
    assert_eq!(code, 0, "{stderr}");
    std::fs::write(dir.join("demo.conllu"), &demo).expect("write");
    std::fs::write(dir.join("empty.conllu"), "").expect("write");
    // stderr is a pipe here, not a terminal: one plain line per epoch, with dev scores.
    let (code, _, stderr) = run(
        &[
            "train",
            "--train",
            &path("demo.conllu"),
            "--dev",
            &path("demo.conllu"),
            "--out",
            &path("m"),
            "--epochs",
            "2",
        ],
        b"",
    );
    assert_eq!(code, 0, "{stderr}");
    let epochs: Vec<&str> = stderr.lines().filter(|l| l.starts_with("epoch")).collect();
    assert_eq!(epochs.len(), 2, "{stderr}");
    assert!(
        epochs[1].contains("dev UAS") && epochs[1].contains("LAS"),
        "{stderr}"
    );
    assert!(
        !stderr.contains('\u{1b}'),
        "no terminal codes in a pipe: {stderr:?}"
    );

    // Plain text given as CoNLL-U: the message names --input text.
    let (code, _, stderr) = run(
        &["parse", "--model", &path("m")],
        b"The pilot signed the manifest.\n",
    );
    assert_eq!(code, 2, "{stderr}");
    assert!(stderr.contains("--input text"), "{stderr}");

    // Evaluation: nothing to score is an error; excluded labels get their own row.
    let (code, _, stderr) = run(
        &[
            "eval",
            "--model",
            &path("m"),
            "--gold",
            &path("empty.conllu"),
        ],
        b"",
    );
    assert_eq!(code, 2, "{stderr}");
    assert!(stderr.contains("no annotated sentence"), "{stderr}");
    // A model's report on the demo sentences, punctuation also scored apart.
    let evaluate = |model: &str| -> (serde_json::Value, String) {
        let (code, stdout, stderr) = run(
            &[
                "eval",
                "--model",
                &path(model),
                "--gold",
                &path("demo.conllu"),
                "--exclude-label",
                "punct",
            ],
            b"",
        );
        assert_eq!(code, 0, "{stderr}");
        (serde_json::from_str(&stdout).expect("JSON report"), stderr)
    };
    let (report, stderr) = evaluate("m");
    assert!(report["excluding_labels"]["tokens"].as_u64() < report["tokens"].as_u64());
    assert!(stderr.contains("projective sentences"), "{stderr}");

    // Recalibration on other held-out sentences: new confidence maps, the same trees; nothing
    // to fit on is an error naming the file.
    let (code, held_out, stderr) = run(&["demo-data", "--sentences", "120", "--seed", "9"], b"");
    assert_eq!(code, 0, "{stderr}");
    std::fs::write(dir.join("held-out.conllu"), &held_out).expect("write");
    let calibrate = |held_out: &str| {
        run(
            &[
                "calibrate",
                "--model",
                &path("m"),
                "--held-out",
                &path(held_out),
                "--out",
                &path("m-calibrated"),
            ],
            b"",
        )
    };
    let (code, _, stderr) = calibrate("empty.conllu");
    assert_eq!(code, 2, "{stderr}");
    assert!(
        stderr.contains("empty.conllu") && stderr.contains("no annotated sentences"),
        "{stderr}"
    );
    let (code, _, stderr) = calibrate("held-out.conllu");
    assert_eq!(code, 0, "{stderr}");
    assert!(stderr.contains("logistic map"), "{stderr}");
    let description = |model: &str| -> serde_json::Value {
        let text = std::fs::read_to_string(dir.join(model).join("model.json")).expect("model.json");
        serde_json::from_str(&text).expect("JSON")
    };
    assert_ne!(
        description("m")["confidence_logit_maps"],
        description("m-calibrated")["confidence_logit_maps"]
    );
    let (recalibrated, _) = evaluate("m-calibrated");
    assert_eq!(
        recalibrated["las"], report["las"],
        "the trees do not change"
    );
    assert!(recalibrated["calibration"]["logit_map"]["slope"].as_f64() > Some(0.0));

    // Prune shows what it would delete and deletes only with --yes.
    let store = path("store");
    let mut versions = Vec::new();
    for _ in 0..2 {
        let (code, stdout, stderr) = run(
            &[
                "store",
                "publish",
                "--store",
                &store,
                "--name",
                "m",
                &path("m"),
            ],
            b"",
        );
        assert_eq!(code, 0, "{stderr}");
        versions.push(stdout.trim().to_string());
    }
    let prune = |yes: bool| {
        let mut args = vec![
            "store", "prune", "--store", &store, "--name", "m", "--keep", "0",
        ];
        if yes {
            args.push("--yes");
        }
        run(&args, b"")
    };
    let (code, stdout, stderr) = prune(false);
    assert_eq!(code, 0, "{stderr}");
    assert_eq!(stdout.lines().count(), 2, "{stdout}");
    assert!(
        stdout.lines().all(|l| l.starts_with("would delete")),
        "{stdout}"
    );
    assert!(stderr.contains("--yes"), "{stderr}");
    let (code, stdout, _) = run(&["store", "list", "--store", &store, "--name", "m"], b"");
    assert_eq!(code, 0);
    assert!(
        versions.iter().all(|v| stdout.contains(v.as_str())),
        "{stdout}"
    );
    let (code, stdout, stderr) = prune(true);
    assert_eq!(code, 0, "{stderr}");
    assert_eq!(
        stdout.lines().filter(|l| l.starts_with("deleted")).count(),
        2
    );

    // ARCWRIGHT_STORE names the store for `parse` too; --model still wins over it, and both
    // on the command line is refused.
    let (code, stdout, stderr) = run(
        &[
            "store",
            "publish",
            "--store",
            &store,
            "--name",
            "m",
            &path("m"),
        ],
        b"",
    );
    assert_eq!(code, 0, "{stderr}");
    let version = stdout.trim().to_string();
    let (code, _, stderr) = run(
        &[
            "store",
            "promote",
            "--store",
            &store,
            "--name",
            "m",
            "--version",
            &version,
        ],
        b"",
    );
    assert_eq!(code, 0, "{stderr}");
    let env = [("ARCWRIGHT_STORE", store.as_str())];
    let sentence = b"The pilot signed the manifest.\n";
    let (code, from_store, stderr) = run_with_env(
        &[
            "parse",
            "--name",
            "m",
            "--input",
            "text",
            "--cache",
            &path("cache"),
        ],
        &env,
        sentence,
    );
    assert_eq!(code, 0, "{stderr}");
    assert!(from_store.contains("\tmanifest\t"), "{from_store}");
    let (code, from_dir, stderr) = run_with_env(
        &["parse", "--model", &path("m"), "--input", "text"],
        &env,
        sentence,
    );
    assert_eq!(code, 0, "{stderr}");
    assert_eq!(from_dir, from_store, "the same model either way");
    let (code, _, stderr) = run(
        &[
            "parse",
            "--model",
            &path("m"),
            "--store",
            &store,
            "--name",
            "m",
        ],
        sentence,
    );
    assert_eq!(code, 2, "{stderr}");
    assert!(stderr.contains("not both"), "{stderr}");

    // The settings check prints a settings file that reads back, and never the token.
    std::fs::write(dir.join("token"), "a-token-of-more-than-16-characters").expect("write");
    let (code, stdout, stderr) = run(
        &[
            "serve",
            "--store",
            &store,
            "--admin-token-file",
            &path("token"),
            "--check-config",
        ],
        b"",
    );
    assert_eq!(code, 0, "{stderr}");
    assert!(!stdout.contains("a-token-of"), "{stdout}");
    std::fs::write(dir.join("resolved.toml"), &stdout).expect("write");
    let (code, _, stderr) = run(
        &[
            "serve",
            "--config",
            &path("resolved.toml"),
            "--check-config",
        ],
        b"",
    );
    assert_eq!(code, 0, "the printed settings read back: {stderr}");
    std::fs::remove_dir_all(&dir).ok();
}

/// `store promote` compares the manifests' scores on the same evaluation data: a version more
/// than `--max-drop` points worse than live is refused (and the refusal logged), `--force`
/// promotes it with the override logged, scores on other data are not compared, and
/// `store history` lists every decision in order.
#[test]
fn the_score_gate_refuses_a_worse_version_and_the_log_keeps_every_decision() {
    let dir = scratch("gate");
    let path = |p: &str| dir.join(p).display().to_string();
    let (code, demo, stderr) = run(&["demo-data", "--sentences", "300", "--seed", "11"], b"");
    assert_eq!(code, 0, "{stderr}");
    std::fs::write(dir.join("demo.conllu"), &demo).expect("write");
    let (code, other, _) = run(&["demo-data", "--sentences", "40", "--seed", "12"], b"");
    assert_eq!(code, 0);
    std::fs::write(dir.join("other.conllu"), &other).expect("write");
    let few: String = demo.split("\n\n").take(8).collect::<Vec<_>>().join("\n\n") + "\n\n";
    std::fs::write(dir.join("few.conllu"), few).expect("write");
    for (model, train, epochs) in [("good", "demo.conllu", "3"), ("weak", "few.conllu", "1")] {
        let (code, _, stderr) = run(
            &[
                "train",
                "--train",
                &path(train),
                "--out",
                &path(model),
                "--epochs",
                epochs,
            ],
            b"",
        );
        assert_eq!(code, 0, "{stderr}");
    }
    let scores = |model: &str, gold: &str| -> serde_json::Value {
        let (code, stdout, stderr) = run(
            &["eval", "--model", &path(model), "--gold", &path(gold)],
            b"",
        );
        assert_eq!(code, 0, "{stderr}");
        std::fs::write(dir.join(format!("{model}-{gold}.json")), &stdout).expect("write");
        serde_json::from_str(&stdout).expect("JSON report")
    };
    let (good, weak) = (scores("good", "demo.conllu"), scores("weak", "demo.conllu"));
    scores("weak", "other.conllu");
    assert_eq!(
        good["gold_fingerprint_fnv64"],
        weak["gold_fingerprint_fnv64"]
    );
    let (good_las, weak_las) = (
        good["las"].as_f64().expect("las"),
        weak["las"].as_f64().expect("las"),
    );
    assert!(
        good_las > weak_las + 0.5,
        "the weak model must be worse: {good_las} vs {weak_las}"
    );
    let store = path("store");
    let publish = |model: &str, scores: &str| -> String {
        let (code, stdout, stderr) = run(
            &[
                "store",
                "publish",
                "--store",
                &store,
                "--name",
                "m",
                &path(model),
                "--scores",
                &path(scores),
            ],
            b"",
        );
        assert_eq!(code, 0, "{stderr}");
        stdout.trim().to_string()
    };
    let good_version = publish("good", "good-demo.conllu.json");
    let weak_version = publish("weak", "weak-demo.conllu.json");
    let elsewhere_version = publish("weak", "weak-other.conllu.json");
    let promote = |version: &str, extra: &[&str]| {
        let mut args = vec![
            "store",
            "promote",
            "--store",
            &store,
            "--name",
            "m",
            "--version",
            version,
        ];
        args.extend_from_slice(extra);
        run(&args, b"")
    };
    let (code, _, stderr) = promote(&good_version, &[]);
    assert_eq!(code, 0, "{stderr}");
    assert!(stderr.contains("no live version"), "{stderr}");
    let (code, _, stderr) = promote(&weak_version, &[]);
    assert_eq!(code, 2, "{stderr}");
    assert!(
        stderr.contains("scores worse than live")
            && stderr.contains("LAS")
            && stderr.contains("--force"),
        "{stderr}"
    );
    let (code, _, stderr) = promote(
        &weak_version,
        &["--force", "--reason", "hotfix for a label"],
    );
    assert_eq!(code, 0, "{stderr}");
    let (code, _, stderr) = promote(&elsewhere_version, &[]);
    assert_eq!(code, 0, "{stderr}");
    assert!(stderr.contains("different evaluation data"), "{stderr}");
    let (code, _, stderr) = run(
        &[
            "store", "rollback", "--store", &store, "--name", "m", "--reason", "paged",
        ],
        b"",
    );
    assert_eq!(code, 0, "{stderr}");
    let (code, stdout, stderr) = run(
        &[
            "store", "history", "--store", &store, "--name", "m", "--json",
        ],
        b"",
    );
    assert_eq!(code, 0, "{stderr}");
    let log: Vec<serde_json::Value> = serde_json::from_str(&stdout).expect("JSON log");
    let summary: Vec<(&str, &str)> = log
        .iter()
        .map(|e| {
            (
                e["action"].as_str().unwrap_or(""),
                e["to"].as_str().unwrap_or(""),
            )
        })
        .collect();
    assert_eq!(
        summary,
        vec![
            ("promote", good_version.as_str()),
            ("refused", weak_version.as_str()),
            ("promote", weak_version.as_str()),
            ("promote", elsewhere_version.as_str()),
            ("rollback", weak_version.as_str()),
        ]
    );
    assert_eq!(log[1]["evidence"]["score_gate"]["live"]["las"], good["las"]);
    assert_eq!(log[2]["reason"], "hotfix for a label");
    assert_eq!(log[2]["evidence"]["forced"], true);
    assert!(log[3]["evidence"]["score_gate"]["not_compared"].is_string());
    assert_eq!(log[4]["reason"], "paged");
    assert!(
        log.iter()
            .all(|e| e["actor"].as_str().is_some_and(|a| a.starts_with("cli:")))
    );
    let (code, table, _) = run(&["store", "history", "--store", &store, "--name", "m"], b"");
    assert_eq!(code, 0);
    assert_eq!(table.lines().count(), 1 + 5, "{table}");
    // The model's rollout policy: set, shown, and a bad value refused naming the field.
    let policy = |args: &[&str]| {
        let mut all = vec!["store", "policy", "--store", &store, "--name", "m"];
        all.extend_from_slice(args);
        run(&all, b"")
    };
    let (code, stdout, stderr) = policy(&["--mode", "automatic", "--min-agreement", "0.95"]);
    assert_eq!(code, 0, "{stderr}");
    let expected = serde_json::json!({"mode": "automatic", "min_agreement": 0.95});
    assert_eq!(
        serde_json::from_str::<serde_json::Value>(&stdout).expect("JSON"),
        expected
    );
    let (code, _, stderr) = policy(&["--min-agreement", "2"]);
    assert_eq!(code, 2, "{stderr}");
    assert!(
        stderr.contains("min_agreement") && stderr.contains("between 0 and 1"),
        "{stderr}"
    );
    let (code, stdout, _) = policy(&[]);
    assert_eq!(code, 0);
    assert_eq!(
        serde_json::from_str::<serde_json::Value>(&stdout).expect("JSON"),
        expected
    );
    std::fs::remove_dir_all(&dir).ok();
}

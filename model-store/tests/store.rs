//! The store on the local backend: round trip, faults, aliases, concurrency, names, change feed.
//! (The S3-compatible backend runs the same operations in `tests/e2e/check_store_s3.py`
//! against a real S3 server on 127.0.0.1.)

use std::path::Path;
use std::time::Duration;

use arcwright_store::{AliasFeed, AliasWatcher, ArtifactInfo, Store, StoreError};

/// A small artifact directory: a model.json and two payload files.
fn artifact(dir: &Path, seed: u8) {
    std::fs::create_dir_all(dir).expect("mkdir");
    std::fs::write(
        dir.join("model.json"),
        format!(r#"{{"format": "arcwright-model/1", "labels": ["a", "b"], "seed": {seed}}}"#),
    )
    .expect("write");
    std::fs::write(dir.join("arcs.f32"), vec![seed; 4096]).expect("write");
    std::fs::write(dir.join("labels.f32"), (0..=255u8).collect::<Vec<_>>()).expect("write");
}

fn store_dir(root: &Path) -> String {
    root.join("store").display().to_string()
}

fn object(root: &Path, name: &str, version: &str, file: &str) -> std::path::PathBuf {
    root.join("store/models")
        .join(name)
        .join("versions")
        .join(version)
        .join(file)
}

#[tokio::test]
async fn publish_list_fetch_round_trip_gives_identical_bytes() {
    let tmp = tempfile::tempdir().expect("tempdir");
    artifact(&tmp.path().join("model"), 7);
    let store = Store::open(&store_dir(tmp.path())).expect("open");
    let manifest = store
        .publish(
            "turkish",
            &tmp.path().join("model"),
            ArtifactInfo {
                format: Some("arcwright-model/1".to_string()),
                labels: vec!["a".to_string(), "b".to_string()],
                scores: Some(serde_json::json!({"uas": 84.2})),
                ..ArtifactInfo::default()
            },
        )
        .await
        .expect("publish");
    assert_eq!(manifest.files.len(), 3);
    assert_eq!(manifest.labels, vec!["a", "b"]);
    assert_eq!(
        manifest.artifact_format.as_deref(),
        Some("arcwright-model/1")
    );
    assert_eq!(store.names().await.expect("names"), vec!["turkish"]);
    assert_eq!(
        store.versions("turkish").await.expect("versions"),
        vec![manifest.version.clone()]
    );
    let (dir, fetched) = store
        .fetch("turkish", &manifest.version, &tmp.path().join("cache"))
        .await
        .expect("fetch");
    assert_eq!(fetched, manifest);
    for file in ["model.json", "arcs.f32", "labels.f32"] {
        assert_eq!(
            std::fs::read(dir.join(file)).expect("read"),
            std::fs::read(tmp.path().join("model").join(file)).expect("read")
        );
    }
}

#[tokio::test]
async fn damaged_versions_are_refused_with_clear_errors() {
    let tmp = tempfile::tempdir().expect("tempdir");
    artifact(&tmp.path().join("model"), 1);
    let store = Store::open(&store_dir(tmp.path())).expect("open");
    let model_dir = tmp.path().join("model");
    let publish = || store.publish("m", &model_dir, ArtifactInfo::default());
    let good = publish().await.expect("publish").version;
    store.set_alias("m", "live", &good).await.expect("promote");

    // Flipped byte.
    let flipped = publish().await.expect("publish").version;
    let path = object(tmp.path(), "m", &flipped, "arcs.f32");
    let mut bytes = std::fs::read(&path).expect("read");
    bytes[100] ^= 0x01;
    std::fs::write(&path, bytes).expect("write");
    let error = store
        .verify("m", &flipped)
        .await
        .expect_err("flipped byte")
        .to_string();
    assert!(
        error.contains(&format!(
            "model m version {flipped}: file arcs.f32 has SHA-256"
        )),
        "{error}"
    );
    let cache = tmp.path().join("cache");
    assert!(store.fetch("m", &flipped, &cache).await.is_err());
    assert!(
        !cache.join("m").join(&flipped).exists(),
        "nothing loaded from a damaged version"
    );
    let error = store
        .set_alias("m", "live", &flipped)
        .await
        .expect_err("no alias to damaged")
        .to_string();
    assert!(error.contains("SHA-256"), "{error}");
    assert_eq!(
        store
            .alias("m", "live")
            .await
            .expect("alias")
            .expect("exists")
            .version,
        good,
        "live unchanged"
    );

    // Truncated payload.
    let truncated = publish().await.expect("publish").version;
    let path = object(tmp.path(), "m", &truncated, "labels.f32");
    std::fs::write(&path, vec![0u8; 10]).expect("write");
    let error = store
        .verify("m", &truncated)
        .await
        .expect_err("truncated")
        .to_string();
    assert!(
        error.contains("file labels.f32 has 10 bytes; the manifest says 256"),
        "{error}"
    );

    // Missing manifest: the version does not exist.
    let headless = publish().await.expect("publish").version;
    std::fs::remove_file(object(tmp.path(), "m", &headless, "manifest.json")).expect("rm");
    assert!(
        !store
            .versions("m")
            .await
            .expect("versions")
            .contains(&headless)
    );
    let error = store
        .fetch("m", &headless, &cache)
        .await
        .expect_err("no manifest")
        .to_string();
    assert!(
        error.contains(&format!(
            "model m version {headless} (no manifest) not found"
        )),
        "{error}"
    );

    // Unknown schema major version.
    let future = publish().await.expect("publish").version;
    let path = object(tmp.path(), "m", &future, "manifest.json");
    let text = std::fs::read_to_string(&path)
        .expect("read")
        .replace("\"schema\": \"1.0\"", "\"schema\": \"2.0\"");
    std::fs::write(&path, text).expect("write");
    let error = store
        .fetch("m", &future, &cache)
        .await
        .expect_err("schema 2")
        .to_string();
    assert!(
        error.contains("manifest schema 2.0; this build reads schema 1.x"),
        "{error}"
    );
    assert!(store.set_alias("m", "live", &future).await.is_err());
    assert_eq!(
        store
            .alias("m", "live")
            .await
            .expect("alias")
            .expect("exists")
            .version,
        good
    );
}

#[tokio::test]
async fn aliases_promote_roll_back_and_protect_from_pruning() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let store = Store::open(&store_dir(tmp.path())).expect("open");
    let mut versions = Vec::new();
    for seed in 0..5 {
        artifact(&tmp.path().join(format!("model{seed}")), seed);
        versions.push(
            store
                .publish(
                    "m",
                    &tmp.path().join(format!("model{seed}")),
                    ArtifactInfo::default(),
                )
                .await
                .expect("publish")
                .version,
        );
    }
    let sorted = {
        let mut v = versions.clone();
        v.sort();
        v
    };
    assert_eq!(sorted, versions, "version ids sort by publishing time");
    store
        .set_alias("m", "live", &versions[0])
        .await
        .expect("promote");
    store
        .set_alias("m", "live", &versions[1])
        .await
        .expect("promote");
    let record = store
        .set_alias("m", "live", &versions[2])
        .await
        .expect("promote");
    assert_eq!(
        record.history,
        vec![versions[1].clone(), versions[0].clone()]
    );
    let record = store.rollback("m", "live").await.expect("rollback");
    assert_eq!(record.version, versions[1]);
    assert_eq!(
        store.rollback("m", "live").await.expect("rollback").version,
        versions[0]
    );
    let error = store
        .rollback("m", "live")
        .await
        .expect_err("nothing earlier")
        .to_string();
    assert!(error.contains("has no earlier target"), "{error}");
    store
        .set_alias("m", "canary", &versions[4])
        .await
        .expect("second alias");
    // Keep the newest 2, never the one `live` points to (versions[0]).
    let deleted = store.prune("m", 2).await.expect("prune");
    assert_eq!(deleted, vec![versions[1].clone(), versions[2].clone()]);
    assert_eq!(
        store.versions("m").await.expect("versions"),
        vec![
            versions[0].clone(),
            versions[3].clone(),
            versions[4].clone()
        ]
    );
    let listed = store.list("m").await.expect("list");
    assert_eq!(listed[0].aliases, vec!["live"]);
    assert_eq!(listed[2].aliases, vec!["canary"]);
}

#[tokio::test]
async fn concurrent_publishes_of_one_name_get_distinct_versions() {
    let tmp = tempfile::tempdir().expect("tempdir");
    artifact(&tmp.path().join("model"), 3);
    let store = Store::open(&store_dir(tmp.path())).expect("open");
    let dir = tmp.path().join("model");
    let tasks: Vec<_> = (0..8)
        .map(|_| {
            let (store, dir) = (store.clone(), dir.clone());
            tokio::spawn(async move {
                store
                    .publish("m", &dir, ArtifactInfo::default())
                    .await
                    .map(|m| m.version)
            })
        })
        .collect();
    let mut versions = Vec::new();
    for task in tasks {
        versions.push(task.await.expect("join").expect("publish"));
    }
    versions.sort();
    versions.dedup();
    assert_eq!(versions.len(), 8, "{versions:?}");
    for v in &versions {
        store.verify("m", v).await.expect("each version complete");
    }
}

#[tokio::test]
async fn bad_names_are_rejected_before_touching_the_store() {
    let tmp = tempfile::tempdir().expect("tempdir");
    artifact(&tmp.path().join("model"), 1);
    let store = Store::open(&store_dir(tmp.path())).expect("open");
    let long = "a".repeat(300);
    let cases: [(&str, &str); 4] = [
        ("../x", "invalid model name \"../x\": it contains '/'"),
        ("", "invalid model name \"\": it is empty"),
        (&long, "it has 300 characters; the limit is 64"),
        ("tab\tname", "it contains '\\t'"),
    ];
    for (name, expected) in cases {
        let error = store
            .publish(name, &tmp.path().join("model"), ArtifactInfo::default())
            .await
            .expect_err("bad name")
            .to_string();
        assert!(error.contains(expected), "{name:?}: {error}");
    }
    assert!(matches!(
        store.manifest("m", "../../etc/passwd").await,
        Err(StoreError::InvalidName { .. })
    ));
    assert!(store.names().await.expect("names").is_empty());
    assert!(Store::open("ftp://host/x").is_err());
}

#[tokio::test]
async fn the_change_feed_reports_each_new_target_once() {
    let tmp = tempfile::tempdir().expect("tempdir");
    artifact(&tmp.path().join("model"), 1);
    let store = Store::open(&store_dir(tmp.path())).expect("open");
    let first = store
        .publish("m", &tmp.path().join("model"), ArtifactInfo::default())
        .await
        .expect("publish")
        .version;
    let second = store
        .publish("m", &tmp.path().join("model"), ArtifactInfo::default())
        .await
        .expect("publish")
        .version;
    store.set_alias("m", "live", &first).await.expect("promote");
    let mut watcher = AliasWatcher::new(
        store.clone(),
        "m",
        "live",
        Duration::from_millis(20),
        Some(first.clone()),
    );
    assert_eq!(
        watcher.poll_now().await.expect("poll"),
        None,
        "no change yet"
    );
    let promoter = {
        let (store, second) = (store.clone(), second.clone());
        tokio::spawn(async move {
            tokio::time::sleep(Duration::from_millis(100)).await;
            store.set_alias("m", "live", &second).await
        })
    };
    let change = tokio::time::timeout(Duration::from_secs(5), watcher.next_change())
        .await
        .expect("in time")
        .expect("change");
    assert_eq!(change.version, second);
    promoter.await.expect("join").expect("promote");
    assert_eq!(
        watcher.poll_now().await.expect("poll"),
        None,
        "reported once"
    );
}

/// An in-memory object store that can be taken down and brought back, to test how the feed
/// behaves while the store fails.
#[derive(Debug)]
struct Switchable {
    inner: object_store::memory::InMemory,
    down: std::sync::atomic::AtomicBool,
}

impl std::fmt::Display for Switchable {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("switchable in-memory store")
    }
}

impl Switchable {
    fn check(&self) -> object_store::Result<()> {
        if self.down.load(std::sync::atomic::Ordering::SeqCst) {
            Err(object_store::Error::Generic {
                store: "switchable",
                source: "the store is down".into(),
            })
        } else {
            Ok(())
        }
    }
}

#[async_trait::async_trait]
impl object_store::ObjectStore for Switchable {
    async fn put_opts(
        &self,
        location: &object_store::path::Path,
        payload: object_store::PutPayload,
        opts: object_store::PutOptions,
    ) -> object_store::Result<object_store::PutResult> {
        self.check()?;
        self.inner.put_opts(location, payload, opts).await
    }
    async fn put_multipart_opts(
        &self,
        location: &object_store::path::Path,
        opts: object_store::PutMultipartOptions,
    ) -> object_store::Result<Box<dyn object_store::MultipartUpload>> {
        self.check()?;
        self.inner.put_multipart_opts(location, opts).await
    }
    async fn get_opts(
        &self,
        location: &object_store::path::Path,
        options: object_store::GetOptions,
    ) -> object_store::Result<object_store::GetResult> {
        self.check()?;
        self.inner.get_opts(location, options).await
    }
    async fn delete(&self, location: &object_store::path::Path) -> object_store::Result<()> {
        self.check()?;
        self.inner.delete(location).await
    }
    fn list(
        &self,
        prefix: Option<&object_store::path::Path>,
    ) -> futures::stream::BoxStream<'static, object_store::Result<object_store::ObjectMeta>> {
        match self.check() {
            Ok(()) => self.inner.list(prefix),
            Err(e) => Box::pin(futures::stream::once(async move { Err(e) })),
        }
    }
    async fn list_with_delimiter(
        &self,
        prefix: Option<&object_store::path::Path>,
    ) -> object_store::Result<object_store::ListResult> {
        self.check()?;
        self.inner.list_with_delimiter(prefix).await
    }
    async fn copy(
        &self,
        from: &object_store::path::Path,
        to: &object_store::path::Path,
    ) -> object_store::Result<()> {
        self.check()?;
        self.inner.copy(from, to).await
    }
    async fn copy_if_not_exists(
        &self,
        from: &object_store::path::Path,
        to: &object_store::path::Path,
    ) -> object_store::Result<()> {
        self.check()?;
        self.inner.copy_if_not_exists(from, to).await
    }
}

/// The service's feed over every model: reports each move once, backs off (interval × 2ⁿ, at
/// most 8×) while the store is down without losing the move made meanwhile, and returns to the
/// interval once the store answers again.
#[tokio::test]
async fn the_feed_backs_off_while_the_store_is_down_and_catches_up() {
    use std::sync::atomic::Ordering;
    let tmp = tempfile::tempdir().expect("tempdir");
    artifact(&tmp.path().join("model"), 1);
    let backend = std::sync::Arc::new(Switchable {
        inner: object_store::memory::InMemory::new(),
        down: std::sync::atomic::AtomicBool::new(false),
    });
    let store = Store::from_objects(backend.clone(), "memory://switchable", true);
    let model_dir = tmp.path().join("model");
    let publish = || store.publish("m", &model_dir, ArtifactInfo::default());
    let first = publish().await.expect("publish").version;
    let second = publish().await.expect("publish").version;
    store.set_alias("m", "live", &first).await.expect("promote");
    let interval = Duration::from_millis(10);
    let mut feed = AliasFeed::new(store.clone(), "live", interval);
    let changes = feed.poll_now().await.expect("poll");
    assert_eq!(changes.len(), 1);
    assert_eq!(
        (changes[0].0.as_str(), &changes[0].1.version),
        ("m", &first)
    );
    assert!(
        feed.poll_now().await.expect("poll").is_empty(),
        "reported once"
    );

    store
        .set_alias("m", "live", &second)
        .await
        .expect("promote");
    backend.down.store(true, Ordering::SeqCst);
    let mut delays = Vec::new();
    for _ in 0..5 {
        let error = feed.next_changes().await.expect_err("the store is down");
        assert!(error.to_string().contains("the store is down"), "{error}");
        delays.push(feed.delay().as_millis());
    }
    assert_eq!(delays, [20, 40, 80, 80, 80]);
    assert_eq!(feed.failures(), 5);

    backend.down.store(false, Ordering::SeqCst);
    let changes = feed.next_changes().await.expect("the store is back");
    assert_eq!(changes.len(), 1, "the move made while the store was down");
    assert_eq!(changes[0].1.version, second);
    assert_eq!(feed.delay(), interval);
}

#[tokio::test]
async fn object_urls_read_write_and_name_what_is_missing() {
    let dir = tempfile::tempdir().unwrap();
    let url = format!("{}/nested/out/a.conllu", dir.path().display());
    let object = arcwright_store::ObjectUrl::parse(&url).unwrap();
    assert!(!object.exists().await.unwrap());
    match object.read().await {
        Err(StoreError::NotFound { what }) => assert_eq!(what, url),
        other => panic!("expected NotFound, got {other:?}"),
    }
    object.write(b"first".to_vec()).await.unwrap();
    object.write(b"second".to_vec()).await.unwrap();
    assert_eq!(&object.read().await.unwrap()[..], b"second");
    let file_url = format!("file://{url}");
    let same = arcwright_store::ObjectUrl::parse(&file_url).unwrap();
    assert_eq!(&same.read().await.unwrap()[..], b"second");
    for bad in [
        "s3://bucket",
        "s3://bucket/",
        "s3:///key",
        "ftp://host/x",
        "gs://b/k",
    ] {
        assert!(
            matches!(
                arcwright_store::ObjectUrl::parse(bad),
                Err(StoreError::BadUrl { .. })
            ),
            "{bad}"
        );
    }
    assert_eq!(
        arcwright_store::join_url("s3://b/p", "x.conllu"),
        "s3://b/p/x.conllu"
    );
    assert_eq!(
        arcwright_store::join_url("out/", "x.conllu"),
        "out/x.conllu"
    );
}

/// Every move through `promote` / `roll_back` and every recorded refusal is one audit entry, in
/// order, with who, from, to, why and the evidence; a promote to where the alias already points
/// records nothing; entries appended at the same moment by many writers are all kept.
#[tokio::test]
async fn alias_decisions_are_kept_in_the_audit_log() {
    use arcwright_store::{Action, Decision};
    let tmp = tempfile::tempdir().expect("tempdir");
    let store = Store::open(&store_dir(tmp.path())).expect("open");
    let mut versions = Vec::new();
    for seed in 0..2 {
        artifact(&tmp.path().join(format!("model{seed}")), seed);
        let dir = tmp.path().join(format!("model{seed}"));
        let manifest = store
            .publish("m", &dir, ArtifactInfo::default())
            .await
            .expect("publish");
        versions.push(manifest.version);
    }
    let decision = |actor: &str, reason: &str| Decision {
        actor: actor.to_string(),
        reason: reason.to_string(),
        evidence: serde_json::json!({"sentences": 7}),
    };
    store
        .promote("m", "live", &versions[0], decision("cli:ops", "first"))
        .await
        .expect("promote");
    store
        .promote("m", "live", &versions[0], decision("cli:ops", "again"))
        .await
        .expect("same target");
    store
        .record_refusal("m", "live", &versions[1], decision("replica:a", "gate"))
        .await
        .expect("refusal");
    store
        .promote(
            "m",
            "live",
            &versions[1],
            decision("replica:b", "gates passed"),
        )
        .await
        .expect("promote");
    store
        .roll_back("m", "live", decision("replica:b", "errors"))
        .await
        .expect("rollback");
    let log = store.history("m").await.expect("history");
    let summary: Vec<(Action, Option<&str>, &str, &str)> = log
        .iter()
        .map(|e| {
            (
                e.action,
                e.from.as_deref(),
                e.to.as_str(),
                e.reason.as_str(),
            )
        })
        .collect();
    assert_eq!(
        summary,
        vec![
            (Action::Promote, None, versions[0].as_str(), "first"),
            (
                Action::Refused,
                Some(versions[0].as_str()),
                versions[1].as_str(),
                "gate"
            ),
            (
                Action::Promote,
                Some(versions[0].as_str()),
                versions[1].as_str(),
                "gates passed"
            ),
            (
                Action::Rollback,
                Some(versions[1].as_str()),
                versions[0].as_str(),
                "errors"
            ),
        ]
    );
    assert!(log.iter().all(|e| e.model == "m" && e.alias == "live"));
    assert_eq!(log[2].actor, "replica:b");
    assert_eq!(log[2].evidence["sentences"], 7);
    // Concurrent appenders: 16 writers at once, none lost.
    let store = std::sync::Arc::new(store);
    let writers: Vec<_> = (0..16)
        .map(|i| {
            let store = store.clone();
            let version = versions[i % 2].clone();
            tokio::spawn(async move {
                store
                    .record_refusal(
                        "m",
                        "live",
                        &version,
                        Decision {
                            actor: format!("replica:{i}"),
                            reason: "concurrent".to_string(),
                            evidence: serde_json::Value::Null,
                        },
                    )
                    .await
            })
        })
        .collect();
    for writer in writers {
        writer.await.expect("join").expect("append");
    }
    let log = store.history("m").await.expect("history");
    assert_eq!(log.len(), 4 + 16);
    // A damaged entry is an error naming it, not a silent gap.
    let audit = tmp.path().join("store/models/m/audit");
    let first = std::fs::read_dir(&audit)
        .expect("audit dir")
        .next()
        .expect("entry")
        .expect("entry")
        .path();
    std::fs::write(&first, b"{not json").expect("damage");
    let error = store.history("m").await.expect_err("damaged").to_string();
    assert!(
        error.contains("audit entry") && error.contains("not readable"),
        "{error}"
    );
}

/// Deciders that read the same state and decide the same move leave one move and one audit
/// entry; a decision taken on a state that has changed since does nothing.
#[tokio::test]
async fn concurrent_automatic_decisions_leave_one_entry() {
    use arcwright_store::{Action, Decided, Decision};
    let tmp = tempfile::tempdir().expect("tempdir");
    let store = std::sync::Arc::new(Store::open(&store_dir(tmp.path())).expect("open"));
    let mut versions = Vec::new();
    for seed in 0..3 {
        let dir = tmp.path().join(format!("model{seed}"));
        artifact(&dir, seed);
        versions.push(
            store
                .publish("m", &dir, ArtifactInfo::default())
                .await
                .expect("publish")
                .version,
        );
    }
    store
        .set_alias("m", "live", &versions[0])
        .await
        .expect("live");
    let deciders: Vec<_> = (0..8)
        .map(|i| {
            let (store, from, to) = (store.clone(), versions[0].clone(), versions[1].clone());
            tokio::spawn(async move {
                store
                    .decide_move(
                        "m",
                        "live",
                        &from,
                        &to,
                        Action::Promote,
                        Decision {
                            actor: format!("replica:{i}"),
                            reason: "gates passed".to_string(),
                            evidence: serde_json::Value::Null,
                        },
                    )
                    .await
            })
        })
        .collect();
    for decider in deciders {
        let outcome = decider.await.expect("join").expect("decide");
        assert!(
            matches!(outcome, Decided::Moved(_) | Decided::AlreadyThere),
            "{outcome:?}"
        );
    }
    assert_eq!(
        store
            .alias("m", "live")
            .await
            .expect("alias")
            .map(|r| r.version),
        Some(versions[1].clone())
    );
    let log = store.history("m").await.expect("history");
    assert_eq!(log.len(), 1, "{log:?}");
    assert_eq!(
        (log[0].action, log[0].from.as_deref(), log[0].to.as_str()),
        (
            Action::Promote,
            Some(versions[0].as_str()),
            versions[1].as_str()
        )
    );
    // Taken on the old state: nothing moves, nothing is written.
    let stale = store
        .decide_move(
            "m",
            "live",
            &versions[0],
            &versions[2],
            Action::Promote,
            Decision::default(),
        )
        .await
        .expect("decide");
    assert_eq!(
        stale,
        Decided::Stale {
            current: Some(versions[1].clone())
        }
    );
    // A rollback decided by several goes back to the previous target, once.
    for _ in 0..3 {
        store
            .decide_move(
                "m",
                "live",
                &versions[1],
                &versions[0],
                Action::Rollback,
                Decision::default(),
            )
            .await
            .expect("rollback");
    }
    let record = store
        .alias("m", "live")
        .await
        .expect("alias")
        .expect("live");
    assert_eq!(
        (record.version.as_str(), record.history.len()),
        (versions[0].as_str(), 0)
    );
    assert_eq!(store.history("m").await.expect("history").len(), 2);
    // The same refusal reached by three deciders is one entry.
    for _ in 0..3 {
        store
            .record_refusal_once("m", "live", &versions[2], Decision::default())
            .await
            .expect("refusal");
    }
    assert_eq!(store.history("m").await.expect("history").len(), 3);
}

//! In-process parse throughput (no server): the ceiling the server's batch capacity is compared
//! with.

use std::time::Duration;

use crate::workload::Sentence;

/// Sentences per second parsing `sentences` in a loop on every core for `span`, with nothing
/// else running: the ceiling the server's batch capacity is compared with. Long enough (seconds,
/// not a burst) to be the sustained rate, not a short burst at boost clock.
pub fn in_process_rate(
    model: &arcwright_parser::model::Model,
    sentences: &[Sentence],
    span: Duration,
) -> f64 {
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    let parsed = std::sync::atomic::AtomicUsize::new(0);
    let started = std::time::Instant::now();
    std::thread::scope(|scope| {
        for t in 0..threads {
            let parsed = &parsed;
            scope.spawn(move || {
                let mut i = 0;
                while started.elapsed() < span && i < 1_000_000 {
                    std::hint::black_box(model.parse(
                        &sentences[(i + t) % sentences.len()],
                        None,
                        None,
                        None,
                    ));
                    i += 1;
                }
                parsed.fetch_add(i, std::sync::atomic::Ordering::Relaxed);
            });
        }
    });
    parsed.into_inner() as f64 / started.elapsed().as_secs_f64()
}

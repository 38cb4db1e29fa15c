//! The calling thread's CPU time: what a sentence costs a core, without the time the thread was
//! waiting for one (other threads, other guests of the host).

/// Seconds of CPU time the calling thread has used (0 if the clock cannot be read).
pub fn thread_seconds() -> f64 {
    let mut ts = libc::timespec {
        tv_sec: 0,
        tv_nsec: 0,
    };
    #[allow(unsafe_code)] // a libc call std does not wrap
    // SAFETY: `ts` is a valid, writable timespec; CLOCK_THREAD_CPUTIME_ID needs no other state.
    let rc = unsafe { libc::clock_gettime(libc::CLOCK_THREAD_CPUTIME_ID, &mut ts) };
    if rc != 0 {
        return 0.0;
    }
    ts.tv_sec as f64 + ts.tv_nsec as f64 * 1e-9
}

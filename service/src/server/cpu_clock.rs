//! The calling thread's CPU time (what a sentence costs a core, without the time the thread was
//! waiting for one) and the kernel's idle scheduling class (for work that must only ever use a
//! core nothing else wants: the decoder probe, shadow parses).

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

/// Puts the calling thread in the idle scheduling class; says whether it worked.
pub fn become_idle_class() -> bool {
    let param = libc::sched_param { sched_priority: 0 };
    #[allow(unsafe_code)] // a libc call std does not wrap
    // SAFETY: pid 0 is the calling thread; `param` is a valid sched_param for SCHED_IDLE.
    unsafe {
        libc::sched_setscheduler(0, libc::SCHED_IDLE, &param) == 0
    }
}

//! Thread pools: the global rayon pool by default, or a cached pool of a chosen size.
//!
//! Pools of a chosen size are kept per calling thread: two callers that each ask for n
//! threads at the same time (e.g. two tasks of one Dask worker, each with `threads=1`) get
//! pools of their own and run side by side, instead of queueing on one shared pool.

use crate::error::{Error, Result};
use std::cell::RefCell;
use std::collections::HashMap;
use std::sync::Arc;

thread_local! {
    static POOLS: RefCell<HashMap<usize, Arc<rayon::ThreadPool>>> = RefCell::new(HashMap::new());
}

/// Threads allowed per core (oversubscription beyond this only costs memory and switches).
pub const MAX_PER_CORE: usize = 8;
/// The cap on threads is never below this.
pub const MIN_CAP: usize = 64;

fn cores() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// Most threads a call may ask for: `max(MIN_CAP, MAX_PER_CORE × cores)`.
pub fn max_threads() -> usize {
    MIN_CAP.max(MAX_PER_CORE * cores())
}

/// Run `f` on `threads` worker threads (`None`: rayon's global pool, sized by the machine or
/// `RAYON_NUM_THREADS`). Pools of a given size are built once and reused.
pub fn run<R: Send>(threads: Option<usize>, f: impl FnOnce() -> R + Send) -> Result<R> {
    match threads {
        None => Ok(f()),
        Some(0) => Err(Error::Range("threads must be at least 1, got 0".into())),
        Some(n) if n > max_threads() => Err(Error::Range(format!(
            "threads = {n} is more than {} ({MAX_PER_CORE} per core of this machine's {} \
             cores, at least {MIN_CAP}); use fewer threads",
            max_threads(),
            cores()
        ))),
        Some(n) => {
            let pool = POOLS.with(|cell| -> Result<Arc<rayon::ThreadPool>> {
                let mut map = cell.borrow_mut();
                if let Some(p) = map.get(&n) {
                    return Ok(Arc::clone(p));
                }
                let p = rayon::ThreadPoolBuilder::new()
                    .num_threads(n)
                    .thread_name(|i| format!("kinemap-{i}"))
                    .build()
                    .map_err(|e| Error::Threads(format!("cannot start {n} threads: {e}")))?;
                let p = Arc::new(p);
                map.insert(n, Arc::clone(&p));
                Ok(p)
            })?;
            Ok(pool.install(f))
        }
    }
}

//! Thread pools: the global rayon pool by default, or a cached pool of a chosen size.

use crate::error::{Error, Result};
use std::collections::HashMap;
use std::sync::{Arc, Mutex, OnceLock};

static POOLS: OnceLock<Mutex<HashMap<usize, Arc<rayon::ThreadPool>>>> = OnceLock::new();

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
            let pool = {
                let map = POOLS.get_or_init(|| Mutex::new(HashMap::new()));
                let mut map = map.lock().unwrap_or_else(|p| p.into_inner());
                match map.get(&n) {
                    Some(p) => Arc::clone(p),
                    None => {
                        let p = rayon::ThreadPoolBuilder::new()
                            .num_threads(n)
                            .thread_name(|i| format!("kinemap-{i}"))
                            .build()
                            .map_err(|e| {
                                Error::Threads(format!("cannot start {n} threads: {e}"))
                            })?;
                        let p = Arc::new(p);
                        map.insert(n, Arc::clone(&p));
                        p
                    }
                }
            };
            Ok(pool.install(f))
        }
    }
}

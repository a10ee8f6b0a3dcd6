//! Read connections with a ceiling. Each store keeps a few idle read connections for reuse and
//! never opens more than `MOST_READERS` at once: a burst of look-ups or exports waits for a free
//! connection (up to `READER_WAIT`, then a timeout problem) instead of opening one connection per
//! request until the database refuses new ones (PostgreSQL's default limit is 100, shared by
//! every replica).

use super::StoreError;
use std::sync::{Condvar, Mutex};
use std::time::{Duration, Instant};

/// Most read connections open at once per store (per replica).
pub const MOST_READERS: usize = 8;
/// How long a read waits for a free connection before it is refused.
pub const READER_WAIT: Duration = Duration::from_secs(5);

/// A capped pool of read connections of type `C`.
pub struct Readers<C> {
    slots: Mutex<Slots<C>>,
    freed: Condvar,
    most: usize,
    wait: Duration,
}

struct Slots<C> {
    idle: Vec<C>,
    /// Connections handed out or idle.
    open: usize,
}

impl<C> Default for Readers<C> {
    fn default() -> Self {
        Readers::new(MOST_READERS, READER_WAIT)
    }
}

impl<C> Readers<C> {
    pub fn new(most: usize, wait: Duration) -> Self {
        Readers {
            slots: Mutex::new(Slots {
                idle: Vec::new(),
                open: 0,
            }),
            freed: Condvar::new(),
            most: most.max(1),
            wait,
        }
    }

    /// An idle connection that `usable` accepts, or a new one from `open` while fewer than the
    /// ceiling are open; otherwise waits for one to come back.
    pub fn take(
        &self,
        usable: impl Fn(&C) -> bool,
        open: impl FnOnce() -> Result<C, StoreError>,
    ) -> Result<C, StoreError> {
        let until = Instant::now() + self.wait;
        let mut slots = self.lock()?;
        loop {
            while let Some(c) = slots.idle.pop() {
                if usable(&c) {
                    return Ok(c);
                }
                slots.open -= 1;
            }
            if slots.open < self.most {
                slots.open += 1;
                drop(slots);
                return open().inspect_err(|_| self.forget());
            }
            let now = Instant::now();
            if now >= until {
                return Err(StoreError::Timeout(format!(
                    "all {} read connections stayed busy for {} s",
                    self.most,
                    self.wait.as_secs()
                )));
            }
            slots = (self.freed.wait_timeout(slots, until - now))
                .map_err(|_| StoreError::Failed("the read pool's lock was poisoned".into()))?
                .0;
        }
    }

    /// Returns a connection for reuse (`keep`), or closes it and frees its place.
    pub fn give_back(&self, conn: C, keep: bool) {
        match self.slots.lock() {
            Ok(mut slots) if keep => slots.idle.push(conn),
            Ok(mut slots) => {
                slots.open -= 1;
                drop(slots);
                drop(conn);
            }
            Err(_) => drop(conn),
        }
        self.freed.notify_one();
    }

    /// Frees the place of a connection that failed to open or was lost.
    fn forget(&self) {
        if let Ok(mut slots) = self.slots.lock() {
            slots.open -= 1;
        }
        self.freed.notify_one();
    }

    /// Takes every idle connection out (to close them on the caller's terms).
    pub fn drain(&mut self) -> Vec<C> {
        match self.slots.get_mut() {
            Ok(slots) => {
                slots.open -= slots.idle.len();
                std::mem::take(&mut slots.idle)
            }
            Err(_) => Vec::new(),
        }
    }

    fn lock(&self) -> Result<std::sync::MutexGuard<'_, Slots<C>>, StoreError> {
        (self.slots.lock())
            .map_err(|_| StoreError::Failed("the read pool's lock was poisoned".into()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Arc;

    #[test]
    fn no_more_than_the_ceiling_are_open_and_a_waiter_gets_a_returned_one() {
        let pool = Arc::new(Readers::<u32>::new(2, Duration::from_millis(300)));
        let a = pool.take(|_| true, || Ok(1)).unwrap();
        let _b = pool.take(|_| true, || Ok(2)).unwrap();
        let refused = pool.take(|_| true, || Ok(3)).unwrap_err();
        assert!(matches!(refused, StoreError::Timeout(_)), "{refused:?}");
        let giver = pool.clone();
        let t = std::thread::spawn(move || {
            std::thread::sleep(Duration::from_millis(50));
            giver.give_back(a, true);
        });
        assert_eq!(
            pool.take(|_| true, || Ok(4)).unwrap(),
            1,
            "reused, not opened"
        );
        t.join().unwrap();
    }

    #[test]
    fn a_closed_or_failed_connection_frees_its_place() {
        let pool = Readers::<u32>::new(1, Duration::from_millis(50));
        let a = pool.take(|_| true, || Ok(1)).unwrap();
        pool.give_back(a, false);
        assert!(pool
            .take(|_| true, || Err(StoreError::Unavailable("x".into())))
            .is_err());
        let b = pool.take(|_| true, || Ok(2)).unwrap();
        pool.give_back(b, true);
        assert_eq!(
            pool.take(|c| *c != 2, || Ok(3)).unwrap(),
            3,
            "unusable idle one replaced"
        );
    }
}

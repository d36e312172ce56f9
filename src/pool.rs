//! Emptied vectors kept for reuse between threads.
//!
//! The parallel reader hands large buffers from thread to thread (chunks of
//! input). Allocated afresh each time, every buffer of a few hundred
//! kilobytes came as new pages that the system had to zero; handed back once
//! emptied, the same few buffers serve the whole run.

use std::sync::Mutex;

/// Vectors kept for reuse, at most [`Pool::KEEP`]; what the reader holds in
/// flight is bounded by its channels anyway.
pub(crate) struct Pool<T>(Mutex<Vec<Vec<T>>>);

impl<T> Default for Pool<T> {
    fn default() -> Self {
        Pool(Mutex::new(Vec::new()))
    }
}

impl<T> Pool<T> {
    pub(crate) const KEEP: usize = 64;

    /// An empty vector, one given back earlier if there is one.
    pub(crate) fn take(&self) -> Vec<T> {
        self.0
            .lock()
            .ok()
            .and_then(|mut v| v.pop())
            .unwrap_or_default()
    }

    /// Give a vector back; its contents are dropped here.
    pub(crate) fn put(&self, mut v: Vec<T>) {
        v.clear();
        if let Ok(mut pool) = self.0.lock() {
            if pool.len() < Self::KEEP {
                pool.push(v);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::Pool;

    #[test]
    fn a_vector_given_back_is_handed_out_again_empty_with_its_room() {
        let pool = Pool::default();
        let mut v = pool.take();
        assert_eq!(v.capacity(), 0);
        v.extend([1u32, 2, 3]);
        let room = v.capacity();
        pool.put(v);
        let again = pool.take();
        assert!(again.is_empty());
        assert_eq!(again.capacity(), room);
        assert_eq!(pool.take().capacity(), 0);
    }

    #[test]
    fn no_more_than_keep_are_kept() {
        let pool = Pool::default();
        for _ in 0..Pool::<u8>::KEEP + 5 {
            pool.put(Vec::<u8>::with_capacity(8));
        }
        let kept = std::iter::from_fn(|| Some(pool.take()))
            .take_while(|v| v.capacity() == 8)
            .count();
        assert_eq!(kept, Pool::<u8>::KEEP);
    }
}

//! A slot that hands a value (buffers, a cache) from one local model of a loss to the next.
//!
//! Successive Newton iterations build models at nearby points, whose large working data
//! (copies of design columns, a Gram block) is mostly the same. The loss owns a [`Reuse`]
//! slot; a model takes the value when it is built and gives it back when it is dropped.
//! The slot is thread-safe, so a loss shared between threads still works (a model that
//! finds the slot empty starts from the default value); cloning a loss starts an empty
//! slot.

use std::sync::Mutex;

/// The slot: empty, or holding the value the last model gave back.
#[derive(Debug)]
pub(crate) struct Reuse<T>(Mutex<Option<T>>);

impl<T> Default for Reuse<T> {
    fn default() -> Self {
        Self(Mutex::new(None))
    }
}

impl<T> Clone for Reuse<T> {
    fn clone(&self) -> Self {
        Self::default()
    }
}

impl<T: Default> Reuse<T> {
    /// The value given back last, or the default one (empty slot, or a poisoned lock).
    pub(crate) fn take(&self) -> T {
        self.0
            .lock()
            .ok()
            .and_then(|mut b| b.take())
            .unwrap_or_default()
    }

    /// Puts a value in the slot for the next model.
    pub(crate) fn give(&self, value: T) {
        if let Ok(mut slot) = self.0.lock() {
            *slot = Some(value);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hands_the_last_value_on_once() {
        let slot: Reuse<Vec<u8>> = Reuse::default();
        assert!(slot.take().is_empty());
        slot.give(vec![1, 2]);
        slot.give(vec![3]);
        assert_eq!(slot.clone().take(), Vec::<u8>::new());
        assert_eq!(slot.take(), vec![3]);
        assert!(slot.take().is_empty());
    }
}

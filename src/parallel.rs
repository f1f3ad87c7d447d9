//! Independent computations shared out over the cores.

/// `f` of every item, in the items' order, computed on up to
/// [`std::thread::available_parallelism`] threads (at least `per_thread` items each),
/// dealt out in turn: item i goes to thread i mod the number of threads, so that
/// neighbouring items, which often cost about the same, are spread. `f` must give
/// the same answer on any thread; then the result is the one a plain loop gives.
pub(crate) fn map_dealt<T: Sync, R: Send>(
    items: &[T],
    per_thread: usize,
    f: impl Fn(&T) -> R + Sync,
) -> Vec<R> {
    let cores = std::thread::available_parallelism().map_or(1, |c| c.get());
    let workers = cores.min(items.len() / per_thread.max(1)).max(1);
    if workers == 1 {
        return items.iter().map(&f).collect();
    }
    let f = &f;
    let share = move |w: usize| {
        items
            .iter()
            .skip(w)
            .step_by(workers)
            .map(f)
            .collect::<Vec<R>>()
    };
    let shares: Vec<Vec<R>> = std::thread::scope(|scope| {
        let handles: Vec<_> = (1..workers)
            .map(|w| scope.spawn(move || share(w)))
            .collect();
        let mut shares = vec![share(0)];
        // A thread can only fail by panicking, which the lints rule out; its share is
        // computed here if it ever does.
        for (w, handle) in (1..workers).zip(handles) {
            shares.push(handle.join().unwrap_or_else(|_| share(w)));
        }
        shares
    });
    let mut shares: Vec<_> = shares.into_iter().map(Vec::into_iter).collect();
    (0..items.len())
        .filter_map(|i| shares.get_mut(i % workers).and_then(Iterator::next))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Whatever the number of items and the share per thread, the result is the
        /// plain loop's, in order.
        #[test]
        fn equals_the_plain_loop(items in proptest::collection::vec(any::<u32>(), 0..200), per in 0usize..8) {
            let f = |x: &u32| u64::from(*x) * 3 + 1;
            let plain: Vec<u64> = items.iter().map(f).collect();
            prop_assert_eq!(map_dealt(&items, per, f), plain);
        }
    }
}

//! Independent computations shared out over the cores.

use std::sync::atomic::{AtomicUsize, Ordering};

/// `f` of every item, in the items' order, computed on up to
/// [`std::thread::available_parallelism`] threads (at least `per_thread` items each).
/// Each thread takes the next item not yet taken, the costliest first by `cost`, so
/// the threads end within about one cheap item of each other whatever the mix, and a
/// thread whose core is busy with other work takes fewer. `f` must give the same
/// answer on any thread; then the result is the one a plain loop gives.
pub(crate) fn map_costliest_first<T: Sync, R: Send, K: Ord>(
    items: &[T],
    per_thread: usize,
    cost: impl Fn(&T) -> K,
    f: impl Fn(&T) -> R + Sync,
) -> Vec<R> {
    let cores = std::thread::available_parallelism().map_or(1, |c| c.get());
    let workers = cores.min(items.len() / per_thread.max(1)).max(1);
    if workers == 1 {
        return items.iter().map(&f).collect();
    }
    let mut order: Vec<(usize, &T)> = items.iter().enumerate().collect();
    order.sort_by_key(|(_, item)| std::cmp::Reverse(cost(item)));
    let next = AtomicUsize::new(0);
    let work = || {
        let mut done = Vec::new();
        while let Some(&(i, item)) = order.get(next.fetch_add(1, Ordering::Relaxed)) {
            done.push((i, f(item)));
        }
        done
    };
    let shares: Vec<Vec<(usize, R)>> = std::thread::scope(|scope| {
        let handles: Vec<_> = (1..workers).map(|_| scope.spawn(work)).collect();
        let mut shares = vec![work()];
        // A thread can only fail by panicking, which the lints rule out; the items it
        // took are computed below if it ever does.
        shares.extend(handles.into_iter().filter_map(|h| h.join().ok()));
        shares
    });
    let mut results: Vec<Option<R>> = items.iter().map(|_| None).collect();
    for (i, result) in shares.into_iter().flatten() {
        if let Some(slot) = results.get_mut(i) {
            *slot = Some(result);
        }
    }
    results
        .into_iter()
        .zip(items)
        .map(|(result, item)| result.unwrap_or_else(|| f(item)))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Whatever the items, their costs and the share per thread, the result is
        /// the plain loop's, in order.
        #[test]
        fn equals_the_plain_loop(
            items in proptest::collection::vec((any::<u32>(), 0u8..4), 0..200),
            per in 0usize..8,
        ) {
            let f = |x: &(u32, u8)| u64::from(x.0) * 3 + 1;
            let plain: Vec<u64> = items.iter().map(f).collect();
            prop_assert_eq!(map_costliest_first(&items, per, |x| x.1, f), plain);
        }
    }
}

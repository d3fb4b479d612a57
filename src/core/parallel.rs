//! Work spread over the machine's cores, with results in a fixed order, so
//! that what the core computes never depends on the number of threads.

/// `work(0..count)` on up to as many threads as the machine has, results in
/// item order. Items are handed out one at a time, so uneven items balance.
pub fn parallel_map<T: Send>(count: usize, work: impl Fn(usize) -> T + Sync) -> Vec<T> {
    let threads = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1)
        .min(count)
        .max(1);
    if threads == 1 {
        return (0..count).map(work).collect();
    }
    let next = std::sync::atomic::AtomicUsize::new(0);
    let mut slots: Vec<Option<T>> = (0..count).map(|_| None).collect();
    std::thread::scope(|scope| {
        let workers: Vec<_> = (0..threads)
            .map(|_| {
                scope.spawn(|| {
                    let mut done = Vec::new();
                    loop {
                        let item = next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                        if item >= count {
                            break;
                        }
                        done.push((item, work(item)));
                    }
                    done
                })
            })
            .collect();
        for worker in workers {
            if let Ok(done) = worker.join() {
                for (item, value) in done {
                    slots[item] = Some(value);
                }
            }
        }
    });
    // A worker that panicked leaves its items empty; they are computed again
    // here, so the panic repeats on this thread and is reported as a bug.
    slots
        .into_iter()
        .enumerate()
        .map(|(item, slot)| slot.unwrap_or_else(|| work(item)))
        .collect()
}

/// `work(i)` for `i` in `0..n`, in order, handed out in chunks of `chunk`
/// items (cheap items, where one at a time would cost more than the work).
pub fn parallel_chunked<T: Send>(
    n: usize,
    chunk: usize,
    work: impl Fn(usize) -> T + Sync,
) -> Vec<T> {
    let chunk = chunk.max(1);
    parallel_map(n.div_ceil(chunk), |c| {
        (c * chunk..((c + 1) * chunk).min(n))
            .map(&work)
            .collect::<Vec<T>>()
    })
    .into_iter()
    .flatten()
    .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn results_come_back_in_item_order() {
        let squares = parallel_map(1000, |i| i * i);
        assert_eq!(squares, (0..1000).map(|i| i * i).collect::<Vec<_>>());
        assert!(parallel_map(0, |i| i).is_empty());
        let cubes = parallel_chunked(1001, 64, |i| i * i * i);
        assert_eq!(cubes, (0..1001).map(|i| i * i * i).collect::<Vec<_>>());
    }
}

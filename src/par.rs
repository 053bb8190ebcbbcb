//! Work spread over the machine's cores: an order-keeping parallel map for the pure per-run
//! work of the records index and of `compare` (parsing, judging). A panic in a worker is
//! passed on, never turned into a silently shorter result.

/// `f` over `items` on every core, in order.
pub fn map<T: Send, U: Send>(items: Vec<T>, f: impl Fn(T) -> U + Sync) -> Vec<U> {
    let threads = std::thread::available_parallelism()
        .map_or(1, |n| n.get())
        .max(1);
    if threads == 1 || items.len() < 2 {
        return items.into_iter().map(f).collect();
    }
    let chunk = items.len().div_ceil(threads).max(1);
    let mut parts: Vec<Vec<T>> = Vec::new();
    let mut items = items.into_iter().peekable();
    while items.peek().is_some() {
        parts.push(items.by_ref().take(chunk).collect());
    }
    let f = &f;
    let n = parts.iter().map(Vec::len).sum();
    std::thread::scope(|s| {
        let handles: Vec<_> = parts
            .into_iter()
            .map(|part| s.spawn(move || part.into_iter().map(f).collect::<Vec<U>>()))
            .collect();
        // Room for every result at once: no growing copies of a large result.
        let mut out = Vec::with_capacity(n);
        for h in handles {
            out.extend(h.join().unwrap_or_else(|p| std::panic::resume_unwind(p)));
        }
        out
    })
}

#[cfg(test)]
mod tests {
    #[test]
    fn keeps_order_and_every_item() {
        let v: Vec<u64> = (0..10_001).collect();
        let out = super::map(v.clone(), |x| x * 3);
        assert_eq!(out, v.iter().map(|x| x * 3).collect::<Vec<_>>());
        assert!(super::map(Vec::<u8>::new(), |x| x).is_empty());
    }
}

//! Counting and ranking sorted monomials (multisets of indices).
//!
//! The degree-p coefficients are stored one per multiset m = (i1 <= i2 <= ... <= ip) of
//! indices in 0..n, in lexicographic order of the tuple. There are C(n+p-1, p) of them.
//! The multisets whose indices are all >= s number C(n-s+p-1, p), so the rank of the first
//! multiset starting with s is
//!
//! ```text
//! offset(s) = C(n+p-1, p) - C(n-s+p-1, p).
//! ```

use crate::error::CoreError;

/// Largest supported degree.
pub const MAX_DEGREE: usize = 8;

/// Binomial coefficient C(a, k), exact, or `None` when it does not fit in u64.
pub fn binomial(a: u64, k: u64) -> Option<u64> {
    if k > a {
        return Some(0);
    }
    let k = k.min(a - k);
    let mut r: u128 = 1;
    for i in 0..k {
        // r * (a - i) is divisible by (i + 1) because r = C(a, i) * ... stays a binomial.
        r = r.checked_mul((a - i) as u128)? / (i as u128 + 1);
    }
    u64::try_from(r).ok()
}

/// Number of multisets of size p from n values: C(n+p-1, p), as usize.
pub fn num_multisets(n: usize, p: usize) -> Result<usize, CoreError> {
    if p == 0 {
        return Ok(1);
    }
    let overflow = || CoreError::SizeOverflow {
        what: format!("C(n + {}, {p}) coefficients for n = {n}, p = {p}", p - 1),
    };
    let top = n.checked_add(p - 1).ok_or_else(overflow)?;
    binomial(top as u64, p as u64)
        .and_then(|v| usize::try_from(v).ok())
        .ok_or_else(overflow)
}

/// Rank of the first multiset whose first index is `s` (0 <= s <= n): `offset(s)` above.
/// Requires `num_multisets(n, p)` to fit (checked by the caller once per polynomial).
pub fn first_index_offset(n: usize, p: usize, s: usize) -> usize {
    debug_assert!(s <= n && p >= 1);
    let total = num_multisets(n, p).expect("caller checked the total size");
    let rest = num_multisets(n - s, p).expect("smaller than the total");
    total - rest
}

/// Number of multisets of size p whose first index is exactly `s`: C(n-s+p-2, p-1).
pub fn count_with_first(n: usize, p: usize, s: usize) -> usize {
    num_multisets(n - s, p - 1).expect("smaller than the total")
}

/// The multiset of rank `r` (lexicographic order) among size-p multisets of 0..n.
/// Writes it into `out[..p]`.
pub fn unrank(n: usize, p: usize, mut r: usize, out: &mut [usize]) {
    let mut lo = 0usize; // indices are >= lo
    for (pos, slot) in out.iter_mut().enumerate().take(p) {
        let k = p - pos; // size of the remaining multiset
        let m = n - lo; // values available: lo..n
                        // Find the largest s in [0, m) with offset_{m,k}(s) <= r.
        let total = num_multisets(m, k).expect("caller checked");
        let (mut a, mut b) = (0usize, m - 1);
        while a < b {
            let mid = (a + b).div_ceil(2);
            let off = total - num_multisets(m - mid, k).expect("smaller");
            if off <= r {
                a = mid;
            } else {
                b = mid - 1;
            }
        }
        r -= total - num_multisets(m - a, k).expect("smaller");
        lo += a;
        *slot = lo;
    }
}

/// Advance a sorted multiset `idx[..p]` of 0..n to its lexicographic successor.
/// Returns false (leaving `idx` unspecified) when `idx` was the last one.
#[inline]
pub fn advance(idx: &mut [usize], n: usize) -> bool {
    let mut j = idx.len();
    while j > 0 {
        j -= 1;
        if idx[j] + 1 < n {
            let v = idx[j] + 1;
            for slot in idx[j..].iter_mut() {
                *slot = v;
            }
            return true;
        }
    }
    false
}

/// c(m) = p! / prod_i (multiplicity of i in m)!: the number of distinct orderings of the
/// sorted multiset `idx`.
pub fn orderings(idx: &[usize]) -> u64 {
    factorial(idx.len()) / orderings_denominator(idx)
}

/// prod_i (multiplicity of i in m)!, the denominator of [`orderings`], for a sorted `idx`.
#[inline]
pub fn orderings_denominator(idx: &[usize]) -> u64 {
    let mut denom: u64 = 1;
    let mut run: u64 = 1;
    for w in idx.windows(2) {
        if w[0] == w[1] {
            run += 1;
            denom *= run;
        } else {
            run = 1;
        }
    }
    denom
}

/// n! for n <= 20.
pub fn factorial(n: usize) -> u64 {
    (1..=n as u64).product()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// All multisets in lexicographic order by brute force (nested loops).
    fn brute(n: usize, p: usize) -> Vec<Vec<usize>> {
        let mut out = vec![];
        let mut cur = vec![0usize; p];
        if p == 0 {
            return vec![vec![]];
        }
        loop {
            out.push(cur.clone());
            if !advance(&mut cur, n) {
                break;
            }
        }
        out
    }

    #[test]
    fn binomial_small_values() {
        assert_eq!(binomial(5, 2), Some(10));
        assert_eq!(binomial(10, 0), Some(1));
        assert_eq!(binomial(3, 5), Some(0));
        assert_eq!(binomial(64, 32), Some(1_832_624_140_942_590_534));
        assert_eq!(binomial(200, 100), None);
    }

    #[test]
    fn successor_enumerates_sorted_tuples_in_order() {
        for n in 1..6 {
            for p in 1..5 {
                let all = brute(n, p);
                assert_eq!(all.len(), num_multisets(n, p).unwrap());
                for w in all.windows(2) {
                    assert!(w[0] < w[1], "lexicographic order");
                }
                for t in &all {
                    assert!(t.windows(2).all(|w| w[0] <= w[1]));
                }
            }
        }
    }

    #[test]
    fn unrank_inverts_enumeration_and_offsets_match() {
        for n in 1..7 {
            for p in 1..6 {
                let all = brute(n, p);
                let mut buf = [0usize; MAX_DEGREE];
                for (r, t) in all.iter().enumerate() {
                    unrank(n, p, r, &mut buf);
                    assert_eq!(&buf[..p], &t[..], "n={n} p={p} r={r}");
                }
                for s in 0..=n {
                    let first = all.iter().position(|t| t[0] >= s).unwrap_or(all.len());
                    assert_eq!(first_index_offset(n, p, s), first);
                    if s < n {
                        let cnt = all.iter().filter(|t| t[0] == s).count();
                        assert_eq!(count_with_first(n, p, s), cnt);
                    }
                }
            }
        }
    }

    #[test]
    fn orderings_is_multinomial() {
        assert_eq!(orderings(&[0, 0, 0]), 1);
        assert_eq!(orderings(&[0, 0, 1]), 3);
        assert_eq!(orderings(&[0, 1, 2]), 6);
        assert_eq!(orderings(&[1, 1, 2, 2]), 6);
        assert_eq!(orderings(&[4]), 1);
        // sum over multisets of c(m) = n^p (multinomial theorem)
        for n in 1..5 {
            for p in 1..5 {
                let s: u64 = brute(n, p).iter().map(|t| orderings(t)).sum();
                assert_eq!(s, (n as u64).pow(p as u32));
            }
        }
    }

    /// n + p - 1 past usize::MAX is an overflow error, not a wrapped (tiny) count.
    #[test]
    fn a_count_whose_top_wraps_is_an_error() {
        for p in 2..=8 {
            assert!(matches!(
                num_multisets(usize::MAX - p + 2, p),
                Err(CoreError::SizeOverflow { .. })
            ));
        }
        assert_eq!(num_multisets(usize::MAX, 1).unwrap(), usize::MAX);
    }
}

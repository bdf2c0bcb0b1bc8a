//! Prefixes of the packed order and the products over them.
//!
//! Coefficients are walked by prefix: every index tuple i1 <= ... <= i_{p-1} <= t with the same
//! prefix (i1, ..., i_{p-1}) is one contiguous segment over its last index t. [`Prefixes`]
//! walks the prefixes of an item in lexicographic order; the kernels need the product of the
//! prefix's x values and the products that leave one or two of them out:
//!
//! ```text
//! q_j = prod_{k != j} xp_k,   r_jk = prod_{l not in {j, k}} xp_l   (j < k).
//! ```

/// Largest prefix length (p - 1) a kernel sees.
pub const MAX_PREFIX: usize = crate::combinatorics::MAX_DEGREE - 1;

/// Given the prefix values xp (length L <= 7), writes `q[j] = prod_{k != j} xp[k]` and returns
/// `prod_k xp[k]`. Uses prefix and suffix products (no division, so zeros are fine).
#[inline(always)]
pub fn leave_one_out(xp: &[f64], q: &mut [f64; MAX_PREFIX]) -> f64 {
    let l = xp.len();
    let mut pre = 1.0;
    for j in 0..l {
        q[j] = pre;
        pre *= xp[j];
    }
    let mut suf = 1.0;
    for j in (0..l).rev() {
        q[j] *= suf;
        suf *= xp[j];
    }
    pre
}

/// `r[j][k] = prod_{l not in {j, k}} xp[l]` for j < k (entries with j >= k are left alone).
#[inline(always)]
pub fn leave_two_out(xp: &[f64], r: &mut [[f64; MAX_PREFIX]; MAX_PREFIX]) {
    let l = xp.len();
    let mut suf = [1.0f64; MAX_PREFIX + 1];
    for j in (0..l).rev() {
        suf[j] = suf[j + 1] * xp[j];
    }
    let mut pre = 1.0;
    for j in 0..l {
        let mut mid = 1.0;
        for k in j + 1..l {
            r[j][k] = pre * mid * suf[k + 1];
            mid *= xp[k];
        }
        pre *= xp[j];
    }
}

/// Walks the prefixes (i1 <= ... <= i_{p-1}) with i1 in lo..hi in lexicographic order. For
/// each, the coefficients with that prefix are the next n - i_{p-1} entries of the item's
/// coefficient range, for last index t = i_{p-1}..n.
pub struct Prefixes {
    pub idx: [usize; MAX_PREFIX],
    len: usize,
    n: usize,
    hi: usize,
    pos: usize,
    started: bool,
}

impl Prefixes {
    #[inline(always)]
    pub fn new(n: usize, degree: usize, lo: usize, hi: usize) -> Self {
        debug_assert!(degree >= 2);
        Prefixes {
            idx: [lo; MAX_PREFIX],
            len: degree - 1,
            n,
            hi,
            pos: 0,
            started: false,
        }
    }

    /// Advances; returns (t0, offset of the first coefficient of this prefix in the item).
    #[inline(always)]
    pub fn next_prefix(&mut self) -> Option<(usize, usize)> {
        let l = self.len;
        if self.started {
            self.pos += self.n - self.idx[l - 1];
            if !crate::combinatorics::advance(&mut self.idx[..l], self.n) || self.idx[0] >= self.hi
            {
                return None;
            }
        } else {
            if self.idx[0] >= self.hi {
                return None;
            }
            self.started = true;
        }
        Some((self.idx[l - 1], self.pos))
    }

    #[inline(always)]
    pub fn prefix(&self) -> &[usize] {
        &self.idx[..self.len]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn leave_out_products() {
        let xp = [2.0, 3.0, 0.0, 5.0];
        let mut q = [0.0; MAX_PREFIX];
        let all = leave_one_out(&xp, &mut q);
        assert_eq!(all, 0.0);
        assert_eq!(&q[..4], &[0.0, 0.0, 30.0, 0.0]);
        let mut r = [[0.0; MAX_PREFIX]; MAX_PREFIX];
        leave_two_out(&xp, &mut r);
        assert_eq!(r[0][1], 0.0);
        assert_eq!(r[0][2], 15.0);
        assert_eq!(r[1][2], 10.0);
        assert_eq!(r[2][3], 6.0);
    }

    #[test]
    fn prefixes_partition_the_item() {
        let (n, p) = (6, 3);
        let mut pr = Prefixes::new(n, p, 1, 4);
        let mut seen = vec![];
        let mut total = 0;
        while let Some((t0, pos)) = pr.next_prefix() {
            assert_eq!(pos, total);
            assert_eq!(t0, pr.prefix()[1]);
            seen.push(pr.prefix().to_vec());
            total += n - t0;
        }
        let want: usize = (1..4)
            .map(|s| crate::combinatorics::count_with_first(n, p, s))
            .sum();
        assert_eq!(total, want);
        assert_eq!(seen.first().unwrap(), &vec![1, 1]);
        assert_eq!(seen.last().unwrap(), &vec![3, 5]);
    }
}

//! Batched kernels: b points (or k directions) in one pass over the coefficients per chunk of
//! up to 32-256 of them (see `chunk_points`).
//!
//! The coefficients are the expensive stream (they come from main memory); the points are
//! small and stay in cache. The walk takes prefixes four at a time when they differ only in
//! their last index (a block, whose four segments follow each other in memory), and runs the
//! register tile of `crate::tile` over the block for 8 (4 with a gradient) points at a
//! time, so that each coefficient is read from memory once and from L1 once per tile:
//!
//! ```text
//! S_r[beta] = sum_t a_{r,t} X[beta, t],   G[beta, t] += sum_r P_r[beta] a_{r,t},
//! E[beta] += sum_r P_r[beta] S_r[beta],  G[beta, ij] += Q_{r,j}[beta] S_r[beta]
//! ```
//!
//! (P_r, Q_{r,j} the prefix products of [`crate::kernels`] for row r at point beta). A batch
//! of b points costs one read of the coefficients plus b cached multiply-adds per coefficient
//! (2 b with gradients), instead of b reads; with many points the multiply-adds, not the
//! memory, set the time.
//!
//! For several Hessian-vector products at one point x (directions V, n x k, taken as k rows):
//!
//! ```text
//! Sx = sum_t a_t x_t,  W[kappa, t] += D[kappa] a_t,  Sv[kappa] = sum_t a_t V[kappa, t],
//! W[kappa, ij] += Q_j Sv[kappa] + dQ_j[kappa] Sx.
//! ```

use crate::error::{try_zeroed, CoreError};
use crate::exec::Exec;
use crate::kernels::{check_len, energy, energy_gradient, items_for, pieces};
use crate::partition::{reduce_sums, WorkItem};
use crate::prefix::{leave_one_out, leave_two_out, Prefixes, MAX_PREFIX};
use crate::simd::{dot, dot_axpy, simd_dispatch, Madd};
use crate::stagger::{rows_at, Rows4, Runs};
use crate::storage::{Coef, Packed};
use crate::tile::{next_block, tile, TileSums, WideTile, SUM_LANES};

/// The transpose of the rows x cols matrix `src` (rows `src_stride` apart), as cols rows of
/// length `dst_stride` >= rows (the extra entries, if any, are zero padding).
fn transpose(
    src: &[f64],
    rows: usize,
    cols: usize,
    src_stride: usize,
    dst_stride: usize,
) -> Result<Vec<f64>, CoreError> {
    let len = cols
        .checked_mul(dst_stride)
        .ok_or_else(|| CoreError::SizeOverflow {
            what: format!("{cols} x {dst_stride} transpose"),
        })?;
    let mut out = try_zeroed(len)?; // a huge batch is an error, not an abort
    transpose_into(src, (rows, cols, src_stride), dst_stride, &mut out);
    Ok(out)
}

/// [`transpose`] into `out` (cols rows of length `dst_stride`, zeroed by the caller).
fn transpose_into(
    src: &[f64],
    (rows, cols, src_stride): (usize, usize, usize),
    dst_stride: usize,
    out: &mut [f64],
) {
    for r in 0..rows {
        for c in 0..cols {
            out[c * dst_stride + r] = src[r * src_stride + c];
        }
    }
}

/// The points in lane layout, X[t, beta] = `rows()[t * stride + beta]`, padded with zero
/// points up to `stride` lanes, starting on a 64-byte boundary (a cache line, one 512-bit
/// vector). Where the stride is a multiple of 8 lanes (32 points, say), each 512-bit load of
/// a lane row then reads one cache line instead of straddling two, whatever address the
/// allocator returned (a batch of 32 energies at n = 400 was up to 10 % slower with its rows
/// 16 bytes past a line, 3-4 % with them 32 bytes past; bench/NOTES.md).
struct LaneRows {
    buf: Vec<f64>,
    off: usize,
    len: usize,
}

impl LaneRows {
    const LINE: usize = 64 / std::mem::size_of::<f64>();

    /// The b points `xs` (b x n row-major) in lane layout of `stride` >= b lanes.
    fn new(xs: &[f64], b: usize, n: usize, stride: usize) -> Result<Self, CoreError> {
        let overflow = || CoreError::SizeOverflow {
            what: format!("{n} x {stride} lane rows"),
        };
        let len = n.checked_mul(stride).ok_or_else(overflow)?;
        let padded = len.checked_add(Self::LINE - 1).ok_or_else(overflow)?;
        let mut buf: Vec<f64> = try_zeroed(padded)?; // an error, not an abort, if too big
                                                     // align_offset may decline (usize::MAX); the rows are then merely unaligned
        let off = Some(buf.as_ptr().align_offset(64))
            .filter(|&o| o < Self::LINE)
            .unwrap_or(0);
        transpose_into(xs, (b, n, n), stride, &mut buf[off..off + len]);
        Ok(LaneRows { buf, off, len })
    }

    fn rows(&self) -> &[f64] {
        &self.buf[self.off..self.off + self.len]
    }
}

/// Per-lane products over the leading prefix indices of a run (all but the last):
/// `base[beta] = prod_m X[lead_m, beta]` and, for the gradient, `loo[m][beta]` = the same product
/// without factor m.
struct Leading {
    base: Vec<f64>,
    loo: Vec<f64>,
}

impl Leading {
    fn new(stride: usize) -> Self {
        Leading {
            base: vec![1.0; stride],
            loo: vec![1.0; MAX_PREFIX * stride],
        }
    }

    /// The products for a run with leading indices `lead`.
    fn set(&mut self, lead: &[usize], xt: &[f64], want_loo: bool) {
        let stride = self.base.len();
        let row = |i: usize| &xt[i * stride..i * stride + stride];
        self.base.fill(1.0);
        for &i in lead {
            for (b, xv) in self.base.iter_mut().zip(row(i)) {
                *b *= xv;
            }
        }
        if want_loo {
            for m in 0..lead.len() {
                let out = &mut self.loo[m * stride..m * stride + stride];
                out.fill(1.0);
                for (k, &i) in lead.iter().enumerate() {
                    if k != m {
                        for (q, xv) in out.iter_mut().zip(row(i)) {
                            *q *= xv;
                        }
                    }
                }
            }
        }
    }
}

/// The energies (and gradients) of the block of rows k.. of a run with leading indices
/// `lead`, for every lane, in tiles of 8 or 4 lanes.
///
/// With S_r the tile sums of row r and T = sum_r X[k + r] S_r, per lane:
/// `E += base T`, `G[k + r] += base S_r`, `G[lead_m] += loo_m T`, and inside the tile
/// `G[t] += sum_r (base X[k + r]) a_r(t)`.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn block_pass<M: Madd, T: Coef>(
    k: usize,
    rows: &Rows4<'_, T>,
    zeros: &[T],
    (lead, products): (&[usize], &Leading),
    xt: &[f64],
    e: &mut [f64],
    g: &mut [f64],
    (wide, from_lane): (Option<WideTile>, usize),
    (s, w): (&mut TileSums, &mut TileSums),
) {
    let stride = e.len();
    let want_grad = !g.is_empty();
    let slices = rows.slices(zeros);
    let active = rows.count;
    let x0 = k * stride;
    // every tile writes all four rows of `s`; the weights of missing rows must be zero
    if want_grad {
        w[active..].iter_mut().for_each(|row| row.fill(0.0));
    }
    let mut g0 = from_lane;
    while g0 < stride {
        let left = stride - g0;
        let wide_lanes = WideTile::LANES.into_iter().find(|&l| l <= left);
        let lanes = match (wide, wide_lanes) {
            (Some(_), Some(l)) => l,
            _ if want_grad || left < 8 => 4,
            _ => 8,
        };
        let xs = &xt[x0 + g0..];
        let grad = if want_grad {
            for r in 0..active {
                for l in 0..lanes {
                    w[r][l] = products.base[g0 + l] * xt[x0 + r * stride + g0 + l];
                }
            }
            Some((&mut g[x0 + g0..], &*w))
        } else {
            None
        };
        // 8 lanes only come without gradients (see `lanes` above)
        match lanes {
            8 => tile::<M, T, 2>(slices, xs, stride, grad, s),
            4 => tile::<M, T, 1>(slices, xs, stride, grad, s),
            _ => wide
                .expect("wide lanes only with a WideTile")
                .run(lanes, slices, xs, stride, grad, s),
        }
        combine_lanes::<M>((x0, g0, lanes, active), s, (lead, products), xt, e, g);
        g0 += lanes;
    }
}

/// Full blocks per group of [`group_pass`].
const SPAN_BLOCKS: usize = 4;
/// Positions per span of [`group_pass`]: 64 rows of X, 16 KiB at 32 lanes, stay in L1 while
/// the group's blocks take their turns.
const SPAN: usize = 64;

/// Energies of up to [`SPAN_BLOCKS`] consecutive full blocks of a run (rows k..k + 4 nb), for
/// every lane ([`spans_for`] says when). Each wide lane group walks the last indices in spans
/// of [`SPAN`] positions and runs each block over the span in turn (`WideTile::group`), so
/// that each span of X is loaded from L2 once for the group instead of once per block, and
/// meanwhile sweeps the next group's coefficients (the bytes after this group) into L2. Per
/// (row, lane) the positions still come in order, so the sums, and the energies, are bitwise
/// those of one [`block_pass`] per block; the lanes past the wide groups take [`block_pass`]
/// itself. Four blocks and spans of 64 measured best (two threads, 32 points, n = 800: 47 ms;
/// eight blocks 53 ms, spans of 128 50 ms).
#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn group_pass<M: Madd, T: Coef>(
    n: usize,
    k: usize,
    blocks: &[Rows4<'_, T>],
    zeros: &[T],
    (lead, products): (&[usize], &Leading),
    xt: &[f64],
    e: &mut [f64],
    wide: WideTile,
    scratch: (&mut TileSums, &mut TileSums),
) {
    let stride = e.len();
    let nb = blocks.len();
    let mut slices = [[zeros; 4]; SPAN_BLOCKS];
    for (slot, b) in slices.iter_mut().zip(blocks) {
        *slot = b.slices(zeros);
    }
    // the sweep of the next group: the bytes after this group's last block
    let last = nb - 1;
    let start = next_block(&slices[last], n - (k + 4 * last));
    let mut g0 = 0;
    // the wide lane groups, chosen as in `block_pass`
    while let Some(lanes) = WideTile::LANES.into_iter().find(|&l| l <= stride - g0) {
        let mut s = [[[0f64; SUM_LANES]; 4]; SPAN_BLOCKS];
        let x = &xt[k * stride + g0..];
        wide.group(lanes, &slices[..nb], x, (stride, SPAN), start, &mut s[..nb]);
        for (b, sb) in s.iter().enumerate().take(nb) {
            let x0 = (k + 4 * b) * stride;
            combine_lanes::<M>((x0, g0, lanes, 4), sb, (lead, products), xt, e, &mut []);
        }
        g0 += lanes;
    }
    if g0 < stride {
        let (s, w) = scratch;
        for (b, rows) in blocks.iter().enumerate() {
            let lanes = (None, g0);
            let scratch = (&mut *s, &mut *w);
            block_pass::<M, T>(
                k + 4 * b,
                rows,
                zeros,
                (lead, products),
                xt,
                e,
                &mut [],
                lanes,
                scratch,
            );
        }
    }
}

/// The per-lane sums after a tile over lanes g0..g0+lanes of the block at row offset x0
/// (`active` real rows): T = sum_r X[k + r] S_r (r in order), E += base T, and with
/// gradients `G[k + r] += base S_r`, then `G[lead_m] += loo_m T` (m in order). Each lane gets the
/// same operations in the same order as a lane-by-lane loop; written as loops over whole
/// lane ranges (no closures, no bounds checks inside) so that they vectorize: the scalar
/// version was about a sixth of a 32-point batch at p = 3, n = 400.
#[inline(always)]
fn combine_lanes<M: Madd>(
    (x0, g0, lanes, active): (usize, usize, usize, usize),
    s: &TileSums,
    (lead, products): (&[usize], &Leading),
    xt: &[f64],
    e: &mut [f64],
    g: &mut [f64],
) {
    let stride = e.len();
    let mut total = [0f64; SUM_LANES];
    let total = &mut total[..lanes];
    for (r, sr) in s.iter().enumerate().take(active) {
        let xr = &xt[x0 + r * stride + g0..][..lanes];
        for ((t, &xv), &sv) in total.iter_mut().zip(xr).zip(&sr[..lanes]) {
            *t = M::madd(xv, sv, *t);
        }
    }
    let base = &products.base[g0..g0 + lanes];
    for ((ev, &bv), &t) in e[g0..g0 + lanes].iter_mut().zip(base).zip(total.iter()) {
        *ev = M::madd(bv, t, *ev);
    }
    if g.is_empty() {
        return;
    }
    for (r, sr) in s.iter().enumerate().take(active) {
        let at = x0 + r * stride + g0;
        for ((gv, &bv), &sv) in g[at..at + lanes].iter_mut().zip(base).zip(&sr[..lanes]) {
            *gv = M::madd(bv, sv, *gv);
        }
    }
    for (m, &i) in lead.iter().enumerate() {
        let at = i * stride + g0;
        let loo = &products.loo[m * stride + g0..][..lanes];
        for ((gv, &lv), &t) in g[at..at + lanes].iter_mut().zip(loo).zip(total.iter()) {
            *gv = M::madd(lv, t, *gv);
        }
    }
}

/// Energies of an item added to `e` (length `stride`, one lane per point, padded lanes have
/// x = 0) and, unless `g` is empty, gradients added to `g` (n x stride, lane layout). `xt` is
/// the points in lane layout: X[t, beta] = xt[t * stride + beta].
#[inline(always)]
fn batch_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    xt: &[f64],
    e: &mut [f64],
    g: &mut [f64],
    (exec, wide, spans): (&Exec, Option<WideTile>, bool),
) {
    let stride = e.len();
    let coeffs = &a[it.start..it.start + it.len];
    let want_grad = !g.is_empty();
    if it.degree == 1 {
        // H = sum_t a_t x_t: one short segment
        for (t, c) in (it.lo..).zip(coeffs) {
            let c = c.to_f64();
            for (beta, ev) in e.iter_mut().enumerate() {
                *ev = M::madd(c, xt[t * stride + beta], *ev);
            }
            if want_grad {
                for gv in &mut g[t * stride..t * stride + stride] {
                    *gv += c;
                }
            }
        }
        return;
    }
    let zeros = vec![T::default(); n];
    let mut products = Leading::new(stride);
    // the tiles' sums and weights, reused by every block of the item
    let (mut s, mut w) = ([[0f64; SUM_LANES]; 4], [[0f64; SUM_LANES]; 4]);
    let mut runs = Runs::new(n, it.degree, it.lo, it.hi);
    while let Some((mut k, k_end, mut pos)) = runs.next_run() {
        let lead = runs.lead();
        products.set(lead, xt, want_grad);
        while k < k_end {
            if exec.stop_requested() {
                return; // a wide batch checks per block: one chunk may be seconds of work
            }
            let grouped = spans && !want_grad && stride >= WideTile::LANES[1] && k_end - k >= 8;
            if let Some(wt) = wide.filter(|_| grouped) {
                let nb = ((k_end - k) / 4).min(SPAN_BLOCKS);
                let (first, mut next) = rows_at(n, k, pos, 4, coeffs);
                let mut blocks = [first; SPAN_BLOCKS];
                for (b, slot) in blocks.iter_mut().enumerate().take(nb).skip(1) {
                    (*slot, next) = rows_at(n, k + 4 * b, next, 4, coeffs);
                }
                pos = next;
                let (rows, scratch) = (&blocks[..nb], (&mut s, &mut w));
                group_pass::<M, T>(n, k, rows, &zeros, (lead, &products), xt, e, wt, scratch);
                k += 4 * nb;
                continue;
            }
            let count = (k_end - k).min(4);
            let (rows, next) = rows_at(n, k, pos, count, coeffs);
            let lanes = (wide, 0);
            let scratch = (&mut s, &mut w);
            block_pass::<M, T>(
                k,
                &rows,
                &zeros,
                (lead, &products),
                xt,
                e,
                g,
                lanes,
                scratch,
            );
            (k, pos) = (k + count, next);
        }
    }
}

simd_dispatch!(fn batch_item => batch_item_body(
    n: usize, a: &[T], it: &WorkItem, xt: &[f64], e: &mut [f64], g: &mut [f64],
    run: (&Exec, Option<WideTile>, bool)) -> ());

/// Whether an energy batch over `poly` with lane stride `stride` walks its blocks in groups
/// of spans ([`group_pass`]). Two cases gain:
///
/// * coefficients larger than the last-level cache, so that every call streams them from
///   memory: two threads, n = 800, 32 points 47-49 ms and 16 points 35-40 ms, against 60-62
///   and 43-45 ms when each block and span was a call of its own with a prefetch one segment
///   ahead, and 73-81 ms for 32 points one block at a time (an earlier run);
/// * one group of 32 lanes (17 to 32 points) whose rows of X for a run, n rows of 256
///   bytes, are larger than [`X_ROWS_IN_L1`]: they then come from L2 at every position of
///   a block, and the walk reads each span of them from L2 once per group. Two threads, 32
///   points: n = 320 5 %, 400 7 %, 500 9 % faster; n = 250 the same and n = 150 10-20 %
///   slower. With several lane groups each group walks the blocks again (64 points at n =
///   400 6 % slower), so those go one block at a time.
///
/// Unknown cache size: only the second case.
fn spans_for<T: Coef>(poly: &Packed<T>, wide: Option<WideTile>, stride: usize) -> bool {
    let from_memory = crate::cache::last_level_bytes().is_some_and(|llc| poly.nbytes() > llc);
    let x_rows = poly.n().saturating_mul(stride * std::mem::size_of::<f64>());
    let one_group = stride == WideTile::LANES[0] && x_rows > X_ROWS_IN_L1;
    wide.is_some() && (from_memory || one_group)
}

/// Bytes of a run's rows of X above which one group of 32 lanes walks in spans (n > 256),
/// set from the measurements at [`spans_for`]: L1 holds 48 KiB on the Xeon measured.
const X_ROWS_IN_L1: usize = 64 << 10;

/// Lanes of the lane layout for b points, the extra ones zero points: b rounded up to a
/// multiple of 4, except with the 512-bit tile, where the points past the groups of 32 are
/// rounded up to a group of 16 or 32 lanes when one wide group costs less than the narrower
/// groups that would take them (per pass at n = 400, two threads: energies of 32 lanes 7.4 ms,
/// 16 + 8 lanes 9.3; with gradients, where 8 lanes go as two groups of four, 16 lanes 10.7
/// ms and 16 + 4 + 4 lanes 21.7). Each lane gets the same bits in any tile, so the padding
/// changes no result.
fn lane_stride(b: usize, wide: bool, want_grad: bool) -> usize {
    let quads = b.div_ceil(4) * 4;
    if !wide {
        return quads;
    }
    let (full, rest) = (b / 32 * 32, b % 32);
    full + match (want_grad, rest) {
        (false, 0..=8) | (true, 0..=4) => rest.div_ceil(4) * 4,
        (_, 9..=16) | (true, 5..=8) => 16,
        (true, 17..=20) => 20,
        _ => 32,
    }
}

/// The batch of b points; `wide` lets the tile take 16 or 32 lanes at once, and `spans` (with
/// `wide`, energies only) walks blocks in groups of spans; the bits per lane are the same
/// either way, energies and gradients alike.
fn run_batch<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    xs: &[f64],
    (b, stride): (usize, usize),
    (want_grad, wide, spans): (bool, Option<WideTile>, bool),
) -> Result<(Vec<f64>, Vec<f64>), CoreError> {
    assert!(
        stride >= b && stride % 4 == 0,
        "lane stride {stride} for {b} points"
    );
    let n = poly.n();
    points_len(n, b, xs)?;
    let lane_rows = LaneRows::new(xs, b, n, stride)?;
    let xt = lane_rows.rows();
    let glen = if want_grad { n * stride } else { 0 };
    // the work split follows the unpadded lanes, so that it, and with it the order of the
    // final sums, is the same whether or not this processor pads the layout
    let quads = b.div_ceil(4) * 4;
    let (acc_len, width) = if want_grad {
        (n * quads, 2 * quads)
    } else {
        (quads, quads)
    };
    let items = items_for(poly, pieces(poly.num_coefficients(), acc_len), width, 1);
    let blocks = poly.blocks();
    let (mut e, g) = reduce_sums(exec, &items, stride, glen, |it, e, g| {
        batch_item::<T>(
            n,
            &blocks[it.block].coeffs,
            it,
            xt,
            e,
            g,
            (exec, wide, spans),
        );
    })?;
    e.truncate(b);
    let grads = if want_grad {
        transpose(&g, n, b, stride, n)?
    } else {
        Vec::new()
    };
    Ok((e, grads))
}

/// Bytes of the points' lane rows (n x lanes numbers) that one pass of a batch keeps to: 2 MiB
/// for energies alone, 512 KiB with gradients, whose accumulator is as large again.
const CHUNK_BYTES: [usize; 2] = [2 << 20, 512 << 10];

/// Most points of one pass of a batch at n: the largest power of two from 32 to 256 whose
/// lane rows fit [`CHUNK_BYTES`] (32 where none does). A wider batch runs as consecutive
/// passes of at most this many points (the last takes the rest). One pass over all points
/// walked each block of coefficients across lane rows and gradient accumulators far larger
/// than L2, each row of them a page or more from the next, and with one accumulator of n x b
/// numbers it was one work item, on one thread. Measured on the Zen 4 host, two threads, time
/// per point of a wide batch, one pass against passes of at most this many points:
///
/// * gradients (with energies): p = 3, n = 300, b = 2048: 987 us in one pass (a busy host);
///   on a quiet one 203 us in passes of 64 or 128, 211 in passes of 32, 231 in passes of
///   256; n = 1000, b = 256: 6.30-6.47 ms in passes of 32 or 64, 7.43 in passes of 128; p = 2,
///   n = 4000, b = 1024: 11.1 ms in one pass; b = 512: 0.44 ms in passes of 32, 0.49 in
///   passes of 16, 1.38 in passes of 64;
/// * energies: p = 3, n = 300, b = 16384: 316 us in one pass, 183-190 us in passes of 128 or
///   256; b = 2048 93-100 us in passes of 32-256; p = 2, n = 4000, b = 1024: 1689 us in one
///   pass; b = 512: 218-245 us in passes of 16-64.
fn chunk_points(n: usize, want_grad: bool) -> usize {
    let row = n.max(1).saturating_mul(std::mem::size_of::<f64>());
    let fit = CHUNK_BYTES[usize::from(want_grad)] / row;
    1 << fit.clamp(32, 256).ilog2()
}

/// b * n, the numbers of b points, checked against `xs` (b x n row-major); the overflow or a
/// wrong length as an error.
fn points_len(n: usize, b: usize, xs: &[f64]) -> Result<usize, CoreError> {
    let len = b.checked_mul(n).ok_or_else(|| CoreError::SizeOverflow {
        what: format!("batch of {b} points"),
    })?;
    check_len("points (b x n)", len, xs.len())?;
    Ok(len)
}

/// The width of the chunks that split `total` points (or directions) into as few chunks of
/// at most `most` as can be, of near-equal widths: ceil(total / m) for m = ceil(total /
/// most), so that a last chunk is never a sliver (257 points in chunks of 256 go as 129 and
/// 128, not 256 and 1, which would take a four-lane tile for one point).
fn balanced_chunk(total: usize, most: usize) -> usize {
    let most = most.max(1);
    total.div_ceil(total.div_ceil(most).max(1)).max(1)
}

/// The b points of `xs` (b x n row-major) through `pass` in [`balanced_chunk`]s of at most
/// [`chunk_points`] points, in order; the energies (b) and, with `want_grad`, the gradients
/// (b x n row-major) of all chunks. A point's bits depend on its chunk's width, which
/// depends on b and n only.
fn by_chunks(
    n: usize,
    xs: &[f64],
    b: usize,
    want_grad: bool,
    mut pass: impl FnMut(&[f64], usize) -> Result<(Vec<f64>, Vec<f64>), CoreError>,
) -> Result<(Vec<f64>, Vec<f64>), CoreError> {
    let most = chunk_points(n, want_grad);
    if b <= most {
        return pass(xs, b);
    }
    let chunk = balanced_chunk(b, most);
    let len = points_len(n, b, xs)?;
    let mut e = Vec::with_capacity(b);
    let mut g: Vec<f64> = if want_grad {
        try_zeroed(len)?
    } else {
        Vec::new()
    };
    for (c, points) in xs.chunks(chunk * n).enumerate() {
        let (ec, gc) = pass(points, points.len() / n)?;
        e.extend_from_slice(&ec);
        if want_grad {
            g[c * chunk * n..c * chunk * n + gc.len()].copy_from_slice(&gc);
        }
    }
    Ok((e, g))
}

/// H at each of b points (`xs` is b x n row-major). One point takes the single-point
/// kernel: a tile of four lanes with three of them empty would cost more than it.
pub fn energy_batch<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    xs: &[f64],
    b: usize,
) -> Result<Vec<f64>, CoreError> {
    if b == 1 {
        return Ok(vec![energy(exec, poly, xs)?]);
    }
    let wide = WideTile::detect();
    let pass = |xs: &[f64], b: usize| {
        let lanes = (b, lane_stride(b, wide.is_some(), false));
        let spans = spans_for(poly, wide, lanes.1);
        run_batch(exec, poly, xs, lanes, (false, wide, spans))
    };
    Ok(by_chunks(poly.n(), xs, b, false, pass)?.0)
}

/// Fewest points for which the energy-and-gradient tile beats single-point calls: at b = 2
/// the tile (four lanes, two of them empty) took 1.32-1.35 times as long as two single calls
/// at p = 3, n = 400 and 800; at b = 3 it took 0.77-0.92 times as long as three.
pub const GRADIENT_TILE_MIN_POINTS: usize = 3;

/// H and grad H at each of b points; the gradients are returned b x n row-major (fewer than
/// [`GRADIENT_TILE_MIN_POINTS`] points take the single-point kernel, one pass each).
pub fn energy_gradient_batch<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    xs: &[f64],
    b: usize,
) -> Result<(Vec<f64>, Vec<f64>), CoreError> {
    if b < GRADIENT_TILE_MIN_POINTS {
        let n = poly.n();
        check_len("points (b x n)", b * n, xs.len())?;
        let (mut es, mut gs) = (Vec::with_capacity(b), Vec::with_capacity(b * n));
        for x in xs.chunks_exact(n) {
            let (e, g) = energy_gradient(exec, poly, x)?;
            es.push(e);
            gs.extend_from_slice(&g);
        }
        return Ok((es, gs));
    }
    let wide = WideTile::detect();
    let pass = |xs: &[f64], b: usize| {
        let lanes = (b, lane_stride(b, wide.is_some(), true));
        run_batch(exec, poly, xs, lanes, (true, wide, false))
    };
    by_chunks(poly.n(), xs, b, true, pass)
}

/// Hessian-vector products of an item for k directions `vs` (k x n) added to `w` (k x n).
#[inline(always)]
fn hvp_many_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    vs: &[f64],
    w: &mut [f64],
    exec: &Exec,
) {
    if it.degree == 1 {
        return;
    }
    let k = vs.len() / n;
    let coeffs = &a[it.start..it.start + it.len];
    let l = it.degree - 1;
    let (mut xp, mut q) = ([0f64; MAX_PREFIX], [0f64; MAX_PREFIX]);
    let mut r = [[0f64; MAX_PREFIX]; MAX_PREFIX];
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    while let Some((t0, pos)) = walk.next_prefix() {
        if exec.stop_requested() {
            return; // many directions: check per prefix, as the batch does
        }
        let pre = walk.prefix();
        let seg = &coeffs[pos..pos + n - t0];
        for j in 0..l {
            xp[j] = x[pre[j]];
        }
        leave_one_out(&xp[..l], &mut q);
        if l >= 2 {
            leave_two_out(&xp[..l], &mut r);
        }
        let sx = dot::<M, T>(seg, &x[t0..]);
        for kap in 0..k {
            let v = &vs[kap * n..kap * n + n];
            let wrow = &mut w[kap * n..kap * n + n];
            let d: f64 = (0..l).map(|j| v[pre[j]] * q[j]).sum();
            let sv = dot_axpy::<M, T>(seg, &v[t0..], &mut wrow[t0..], d);
            for j in 0..l {
                let mut dq = 0.0;
                for m in 0..l {
                    if m != j {
                        dq += v[pre[m]] * if j < m { r[j][m] } else { r[m][j] };
                    }
                }
                wrow[pre[j]] += q[j] * sv + dq * sx;
            }
        }
    }
}

simd_dispatch!(fn hvp_many_item => hvp_many_item_body(
    n: usize, a: &[T], it: &WorkItem, x: &[f64], vs: &[f64], w: &mut [f64], exec: &Exec) -> ());

/// Hess H(x) V for k directions; `vs` and the result are n x k row-major.
pub fn hvp_many<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    x: &[f64],
    vs: &[f64],
    k: usize,
) -> Result<Vec<f64>, CoreError> {
    let n = poly.n();
    check_len("directions (n x k)", directions_len(n, k)?, vs.len())?;
    let rows = transpose(vs, n, k, k, n)?; // k x n: one contiguous row per direction
    hvp_many_rows(exec, poly, x, &rows, k)
}

/// n * k, the numbers of k directions, or the overflow as an error.
fn directions_len(n: usize, k: usize) -> Result<usize, CoreError> {
    n.checked_mul(k).ok_or_else(|| CoreError::SizeOverflow {
        what: format!("{k} directions"),
    })
}

/// [`hvp_many`] with the directions given as `rows`, k x n row-major (one contiguous row per
/// direction, the layout the pass reads), which saves the caller a copy of n x k numbers; the
/// result is n x k row-major. The directions go in passes of [`direction_chunk`] each, whose
/// work split (and so the last bits of its products) depends on n and its own width.
pub fn hvp_many_rows<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    x: &[f64],
    rows: &[f64],
    k: usize,
) -> Result<Vec<f64>, CoreError> {
    let n = poly.n();
    check_len("x", n, x.len())?;
    let len = directions_len(n, k)?;
    check_len("directions (k x n)", len, rows.len())?;
    let chunk = direction_chunk(n, k);
    let mut out: Vec<f64> = try_zeroed(len)?; // n x k, filled chunk by chunk
    let blocks = poly.blocks();
    // every chunk, a narrower last one too, is cut as a full one, so that no pass holds more
    // than the accumulators of a full chunk (the count the Python memory check makes)
    let count = pieces(poly.num_coefficients(), chunk * n);
    for (c, part) in rows.chunks(chunk * n).enumerate() {
        let kc = part.len() / n;
        let items = items_for(poly, count, 2 * kc + 1, 1);
        let (_, w) = reduce_sums(exec, &items, 0, part.len(), |it, _, w| {
            hvp_many_item::<T>(n, &blocks[it.block].coeffs, it, x, part, w, exec);
        })?;
        // w is kc x n: direction j of the chunk is column c * chunk + j of the result
        transpose_into(&w, (kc, n, n), k, &mut out[c * chunk..]);
    }
    Ok(out)
}

/// The directions of one pass of [`hvp_many_rows`] for k of them at n: the near-equal chunk
/// (`balanced_chunk`) of at most the gradients' `chunk_points` (32-256), since each prefix
/// reads a row of every direction and writes a row of its accumulator, as the gradient tile
/// does for its points. One pass over all directions read
/// and wrote rows far larger than L2 at every prefix, on one thread: median of three calls
/// on the Zen 4 host, two threads, one pass against passes of 32-256 directions: p = 3, n =
/// 300, 1024 directions 1581 ms against 638-694 ms; p = 2, n = 4000, 512 directions 2284 ms
/// against 591 ms (16), 612 ms (32) and 1158 ms (64); p = 4, n = 100, 512 directions 860
/// against 742-781 ms.
pub fn direction_chunk(n: usize, k: usize) -> usize {
    balanced_chunk(k, chunk_points(n, true))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernels::tests::{naive, pool};
    use crate::kernels::{hvp, pieces};
    use crate::sampling::Disorder;

    /// The wide tile gives every point the same bits as the AVX2 tile, energies and
    /// gradients, and so does the walk in groups of spans (energies): batches whose lanes
    /// split into 32, 16, 8 and 4, or that only the wide tile pads up to 16 or 32 lanes (7
    /// and 12 points, 24 and 60; at n = 150, 12 points with gradients would be split into
    /// fewer work items if the padded lanes counted), for both storage types, with runs of
    /// one span and (n = 150) of several spans and partial groups.
    #[test]
    fn wide_tile_batch_is_bitwise_the_narrow_one() {
        let Some(wide) = WideTile::detect() else {
            eprintln!("no AVX-512F on this processor: wide batch not tested");
            return;
        };
        fn both<T: Coef>(poly: &Packed<T>, xs: &[f64], b: usize, wide: WideTile) {
            // each tile on the lane layout it gets in use
            let p = pool(2);
            let (narrow, lanes) = (
                (b, lane_stride(b, false, false)),
                (b, lane_stride(b, true, false)),
            );
            let (nw, _) = run_batch(&p, poly, xs, narrow, (false, None, false)).unwrap();
            for spans in [false, true] {
                let (w, _) = run_batch(&p, poly, xs, lanes, (false, Some(wide), spans)).unwrap();
                assert_eq!(w.len(), b);
                for (beta, (a, c)) in w.iter().zip(&nw).enumerate() {
                    let what = format!("{} b {b} spans {spans} point {beta}", T::NAME);
                    assert_eq!(a.to_bits(), c.to_bits(), "{what}");
                }
            }
            let (narrow, lanes) = (
                (b, lane_stride(b, false, true)),
                (b, lane_stride(b, true, true)),
            );
            let (we, wg) = run_batch(&p, poly, xs, lanes, (true, Some(wide), false)).unwrap();
            let (ne, ng) = run_batch(&p, poly, xs, narrow, (true, None, false)).unwrap();
            assert_eq!((we.len(), wg.len()), (b, xs.len()));
            for (beta, (a, c)) in we.iter().zip(&ne).enumerate() {
                assert_eq!(a.to_bits(), c.to_bits(), "{} b {b} energy {beta}", T::NAME);
            }
            for (i, (a, c)) in wg.iter().zip(&ng).enumerate() {
                assert_eq!(
                    a.to_bits(),
                    c.to_bits(),
                    "{} b {b} gradient entry {i}",
                    T::NAME
                );
            }
        }
        let terms = [(2usize, 1.0), (3, 0.6), (4, 0.4)];
        let long = [(1usize, 0.3), (2, 1.0), (3, 0.6)];
        let sizes = [
            (17usize, 16usize),
            (17, 20),
            (17, 7),
            (17, 12),
            (30, 24),
            (30, 35),
        ];
        for (n, b) in sizes.into_iter().chain([(30, 60), (150, 37), (150, 12)]) {
            let terms = if n > 100 { &long[..] } else { &terms[..] };
            let xs: Vec<f64> = (0..b * n).map(|i| ((i as f64) * 0.43).sin()).collect();
            let d = Disorder::new(9);
            both(
                &Packed::<f64>::sample(&pool(2), n, terms, &d).unwrap(),
                &xs,
                b,
                wide,
            );
            both(
                &Packed::<f32>::sample(&pool(2), n, terms, &d).unwrap(),
                &xs,
                b,
                wide,
            );
        }
    }

    #[test]
    fn batch_matches_single_points() {
        // b = 1 (single kernel), 2 (single kernel for gradients, tile for energies), 3 (the
        // smallest gradient tile), 5 (lanes 8 + padding), 11 (8 + 4 lanes); n = 23 gives
        // blocks of four rows with short and partial blocks at the end of each run
        // 19 and 37 (where the processor has AVX-512F) take the 16- and 32-lane wide tile
        for (n, b) in [
            (1usize, 5usize),
            (4, 1),
            (9, 2),
            (9, 3),
            (11, 5),
            (23, 11),
            (23, 19),
            (9, 37),
        ] {
            let terms = [(1usize, 0.5), (2, 1.0), (3, 0.6), (5, 0.3)];
            let poly = Packed::<f64>::sample(&pool(2), n, &terms, &Disorder::new(2)).unwrap();
            let xs: Vec<f64> = (0..b * n).map(|i| ((i as f64) * 0.61).cos()).collect();
            let p = pool(2);
            let e_only = energy_batch(&p, &poly, &xs, b).unwrap();
            let (e, g) = energy_gradient_batch(&p, &poly, &xs, b).unwrap();
            for beta in 0..b {
                let x = &xs[beta * n..beta * n + n];
                let (e0, g0, _) = naive(&poly, x);
                let tol = 1e-11 * (1.0 + e0.abs());
                assert!((e[beta] - e0).abs() < tol && (e_only[beta] - e0).abs() < tol);
                for i in 0..n {
                    assert!((g[beta * n + i] - g0[i]).abs() < 1e-10 * (1.0 + g0[i].abs()));
                }
            }
        }
    }

    /// A batch wider than [`chunk_points`] runs as consecutive passes: its energies and
    /// gradients are bitwise those of the chunks as batches of their own, and match the
    /// single-point values.
    #[test]
    fn wide_batch_is_its_chunks_and_matches_single_points() {
        assert_eq!(chunk_points(300, false), 256); // 2 MiB / 2400 bytes = 873
        assert_eq!(chunk_points(300, true), 128); // 512 KiB / 2400 bytes = 218
        assert_eq!(chunk_points(1000, true), 64);
        assert_eq!(chunk_points(4000, false), 64);
        assert_eq!(chunk_points(4000, true), 32);
        assert_eq!(chunk_points(1 << 20, true), 32);
        let (n, b) = (12usize, 600usize); // at most 256 per chunk: three chunks of 200
        assert_eq!(balanced_chunk(b, chunk_points(n, true)), 200);
        assert_eq!(balanced_chunk(257, 256), 129);
        assert_eq!(balanced_chunk(256, 256), 256);
        assert_eq!(balanced_chunk(33, 32), 17);
        let terms = [(1usize, 0.5), (2, 1.0), (3, 0.6)];
        let poly = Packed::<f64>::sample(&pool(2), n, &terms, &Disorder::new(5)).unwrap();
        let xs: Vec<f64> = (0..b * n).map(|i| ((i as f64) * 0.37).sin()).collect();
        let p = pool(2);
        let e_all = energy_batch(&p, &poly, &xs, b).unwrap();
        let (eg_all, g_all) = energy_gradient_batch(&p, &poly, &xs, b).unwrap();
        let (mut e_parts, mut eg_parts, mut g_parts) = (vec![], vec![], vec![]);
        for part in xs.chunks(200 * n) {
            let c = part.len() / n;
            e_parts.extend(energy_batch(&p, &poly, part, c).unwrap());
            let (e, g) = energy_gradient_batch(&p, &poly, part, c).unwrap();
            eg_parts.extend(e);
            g_parts.extend(g);
        }
        let bits = |v: &[f64]| v.iter().map(|f| f.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&e_all), bits(&e_parts));
        assert_eq!(bits(&eg_all), bits(&eg_parts));
        assert_eq!(bits(&g_all), bits(&g_parts));
        for beta in [0, 199, 200, 399, 400, 599] {
            let (e0, g0, _) = naive(&poly, &xs[beta * n..beta * n + n]);
            assert!(
                (e_all[beta] - e0).abs() < 1e-11 * (1.0 + e0.abs()),
                "point {beta}"
            );
            for i in 0..n {
                let g = g_all[beta * n + i];
                assert!(
                    (g - g0[i]).abs() < 1e-10 * (1.0 + g0[i].abs()),
                    "point {beta} {i}"
                );
            }
        }
    }

    /// Buffers of a batch too large to exist are an error, not an abort: the lane rows and
    /// the transposes allocate with `try_zeroed` and check their products.
    #[test]
    fn impossible_batch_buffers_are_errors() {
        let huge = usize::MAX / 4;
        assert!(matches!(
            LaneRows::new(&[], 0, huge, 8),
            Err(CoreError::SizeOverflow { .. })
        ));
        assert!(matches!(
            transpose(&[], 0, huge, 0, 8),
            Err(CoreError::SizeOverflow { .. })
        ));
        // a size that does not overflow but that no allocator can give (2^60 bytes)
        assert!(matches!(
            transpose(&[], 0, 1 << 54, 0, 8),
            Err(CoreError::AllocationFailed { .. })
        ));
    }

    /// The lane rows hold the transpose of the points, zero-padded, from a 64-byte boundary.
    #[test]
    fn lane_rows_are_the_padded_transpose_on_a_line_boundary() {
        for (b, n, stride) in [(1, 1, 4), (6, 19, 8), (32, 7, 32), (5, 3, 8)] {
            let xs: Vec<f64> = (0..b * n).map(|i| 1.0 + i as f64).collect();
            for _ in 0..4 {
                let lr = LaneRows::new(&xs, b, n, stride).unwrap();
                let rows = lr.rows();
                assert_eq!(rows.as_ptr() as usize % 64, 0, "b {b} n {n}");
                assert_eq!(rows.len(), n * stride);
                for t in 0..n {
                    for beta in 0..stride {
                        let want = if beta < b { xs[beta * n + t] } else { 0.0 };
                        assert_eq!(rows[t * stride + beta], want, "b {b} t {t} lane {beta}");
                    }
                }
            }
        }
    }

    #[test]
    fn portable_and_vector_batch_paths_agree() {
        use crate::simd::{has_avx2_fma, Fused, Plain};
        if !has_avx2_fma() {
            return;
        }
        let (n, b, stride) = (19, 6, 8);
        let terms = [(1usize, 0.4), (2, 1.0), (3, 0.7), (4, 0.2)];
        let poly = Packed::<f32>::sample(&pool(2), n, &terms, &Disorder::new(8)).unwrap();
        let xs: Vec<f64> = (0..b * n).map(|i| ((i as f64) * 0.29).sin()).collect();
        let lane_rows = LaneRows::new(&xs, b, n, stride).unwrap();
        let xt = lane_rows.rows();
        let exec = pool(1);
        let run = |fused: bool| {
            let (mut e, mut g) = (vec![0.0; stride], vec![0.0; n * stride]);
            let walk = (&exec, None, false);
            for it in &items_for(&poly, 3, 1, 1).items {
                let a = &poly.blocks()[it.block].coeffs;
                if fused {
                    batch_item_body::<Fused, f32>(n, a, it, xt, &mut e, &mut g, walk);
                } else {
                    batch_item_body::<Plain, f32>(n, a, it, xt, &mut e, &mut g, walk);
                }
            }
            (e, g)
        };
        let ((e1, g1), (e2, g2)) = (run(true), run(false));
        for (u, v) in e1.iter().zip(&e2).chain(g1.iter().zip(&g2)) {
            assert!((u - v).abs() < 1e-12 * (1.0 + u.abs()), "{u} vs {v}");
        }
        assert!(e1[..b].iter().all(|v| *v != 0.0));
    }

    #[test]
    fn many_directions_match_single_direction() {
        let n = 13;
        let terms = [(2usize, 1.0), (3, 0.6), (4, 0.3)];
        let poly = Packed::<f32>::sample(&pool(2), n, &terms, &Disorder::new(4)).unwrap();
        let x: Vec<f64> = (0..n).map(|i| (i as f64 * 0.3).sin()).collect();
        let k = 3;
        let vs: Vec<f64> = (0..n * k).map(|i| (i as f64 * 0.17).cos()).collect();
        let p = pool(2);
        let w = hvp_many(&p, &poly, &x, &vs, k).unwrap();
        for kap in 0..k {
            let v: Vec<f64> = (0..n).map(|t| vs[t * k + kap]).collect();
            let w1 = hvp(&p, &poly, &x, &v).unwrap();
            for t in 0..n {
                assert!((w[t * k + kap] - w1[t]).abs() < 1e-10 * (1.0 + w1[t].abs()));
            }
        }
    }

    /// More directions than [`direction_chunk`] run as passes over chunks (three of 200 at n
    /// = 13): the products are bitwise those of each chunk on its own, in their columns, and
    /// match the one-direction kernel.
    #[test]
    fn many_directions_are_their_chunks_and_match_single_direction() {
        let (n, k) = (13usize, 600usize);
        assert_eq!(direction_chunk(n, k), 200); // at most 256 at n = 13
        assert_eq!(direction_chunk(4000, 1000), 32);
        assert_eq!(direction_chunk(4000, 33), 17);
        let terms = [(1usize, 0.4), (2, 1.0), (3, 0.6)];
        let poly = Packed::<f64>::sample(&pool(2), n, &terms, &Disorder::new(7)).unwrap();
        let x: Vec<f64> = (0..n).map(|i| (i as f64 * 0.3).sin()).collect();
        let rows: Vec<f64> = (0..k * n).map(|i| (i as f64 * 0.23).cos()).collect();
        let p = pool(2);
        let w = hvp_many_rows(&p, &poly, &x, &rows, k).unwrap(); // n x k
        for (c, part) in rows.chunks(200 * n).enumerate() {
            let kc = part.len() / n;
            let wc = hvp_many_rows(&p, &poly, &x, part, kc).unwrap(); // n x kc
            for t in 0..n {
                for j in 0..kc {
                    let got = w[t * k + c * 200 + j];
                    assert_eq!(got.to_bits(), wc[t * kc + j].to_bits(), "({t}, {c} {j})");
                }
            }
        }
        for kap in [0, 199, 200, 599] {
            let w1 = hvp(&p, &poly, &x, &rows[kap * n..kap * n + n]).unwrap();
            for t in 0..n {
                let got = w[t * k + kap];
                assert!(
                    (got - w1[t]).abs() < 1e-10 * (1.0 + w1[t].abs()),
                    "{kap} {t}"
                );
            }
        }
    }

    #[test]
    fn batch_is_bitwise_identical_across_thread_counts() {
        let n = 60; // 37,820 coefficients: 2 work items
        let poly = Packed::<f64>::sample(&pool(2), n, &[(3, 1.0)], &Disorder::new(6)).unwrap();
        assert!(pieces(poly.num_coefficients(), 4 * n) >= 2);
        let xs: Vec<f64> = (0..4 * n).map(|i| ((i as f64) * 0.05).sin()).collect();
        let one = energy_gradient_batch(&pool(1), &poly, &xs, 4).unwrap();
        for k in [2, 4] {
            assert_eq!(energy_gradient_batch(&pool(k), &poly, &xs, 4).unwrap(), one);
        }
        let inline = energy_gradient_batch(&Exec::inline(), &poly, &xs, 4).unwrap();
        assert_eq!(inline, one, "on the calling thread");
    }
}

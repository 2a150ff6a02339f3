//! The narrow pass with eight rows as the lanes of an AVX-512 vector.
//!
//! [`super::NarrowBlock`] at the other levels multiplies each transformed
//! row by its own lanes: for `K` values a row that is one fused
//! multiply-add per value and vector of lanes (14 a row for 11 values),
//! more than half of them products above the diagonal, thrown away. Here
//! eight rows are transposed in registers into column vectors (lane `q`
//! holds row `q` of the eight), transformed as columns, stored to a chunk
//! of [`GROUPS`] such groups in the first-level cache, and each entry of
//! the lower triangle is one fused multiply-add of two column vectors a
//! group: `K (K + 1) / 16` a row (8.25 for 11 values).
//!
//! The order of the sums differs from the other levels: lane `q` of an
//! entry is one chain of fused multiply-adds over the rows `r0 + q`,
//! `r0 + q + 8`, ... of the range in order, and the eight lanes are added at
//! the range's end in one fixed order, `((l0 + l1) + (l2 + l3)) + ((l4 +
//! l5) + (l6 + l7))`. The rows of a range do not depend on the thread
//! count, so neither do the bits; the levels agree to rounding (as every
//! level's kernels must). Zero-weight rows and the rows that fill the last
//! group are zero lanes (exact no-ops), not skipped.

use core::arch::x86_64::__m512d;

use pulp::x86::V4;
use pulp::{Simd, WithSimd};

use super::{Narrow, NARROW};
use crate::linalg::kernels::prefetch;

/// Lanes of a vector: rows a group.
const LANES: usize = 8;

/// Groups of [`LANES`] rows a chunk (32 rows: at 16 columns 4 KiB, as the
/// other levels' chunk).
const GROUPS: usize = 4;

/// Most sums a tile keeps in registers (with the tile's columns and a row
/// operand, within the 32 vector registers; more spilled in measurement).
const MAX_SUMS: usize = 15;

/// Entries of the lower triangle of [`NARROW`] values.
const ENTRIES: usize = NARROW * (NARROW + 1) / 2;

/// Most sums of a tile fit the tile's register array.
const _: () = assert!(MAX_SUMS <= NARROW);

/// The chunk: column `j` of group `g` at `[j * GROUPS + g]`.
#[repr(align(64))]
struct Columns([[f64; LANES]; NARROW * GROUPS]);

/// Whether [`block`] takes `job` (on a processor with AVX-512): rows with
/// the target (the solvers' pass; `p = K - 1` is then a constant of the
/// kernel) of 6, 7 or 9 to 13 values, where it measured faster than the
/// other levels' kernel on one core in cache (AMD EPYC, 20,000 rows, ns a
/// row for `p` columns: 5: 2.95 -> 1.93, 6: 3.15 -> 2.64, 8: 4.55 ->
/// 3.51, 9: 5.1 -> 4.26, 10: 5.55 -> 4.75, 11: 6.25 -> 5.9, 12: 6.9 ->
/// 6.5); at 7 columns (one whole vector a row) 9% slower, at 13 to 15 the
/// same.
pub(super) fn takes(job: &Narrow<'_>) -> bool {
    matches!(job.k, 6 | 7 | 9..=13) && job.k == job.p + 1
}

/// Sums of the range `r0..r1` as [`super::NarrowBlock`] returns them (row
/// `i` holds `sum z_i z_l` for `l <= i`), in eight lanes as described
/// above. `None` when the processor has no AVX-512 or [`takes`] does not
/// take the job.
pub(super) fn block(job: &Narrow<'_>, r0: usize, r1: usize) -> Option<[[f64; NARROW]; NARROW]> {
    if !takes(job) {
        return None;
    }
    let v4 = V4::try_new()?;
    Simd::vectorize(v4, Lanes { v4, job, r0, r1 })
}

struct Lanes<'a, 'b> {
    v4: V4,
    job: &'a Narrow<'b>,
    r0: usize,
    r1: usize,
}

impl WithSimd for Lanes<'_, '_> {
    type Output = Option<[[f64; NARROW]; NARROW]>;

    #[inline(always)]
    fn with_simd<S: Simd>(self, _simd: S) -> Self::Output {
        macro_rules! widths {
            ($w:literal) => {
                match self.job.k {
                    6 => Some(self.run::<$w, 6>()),
                    7 => Some(self.run::<$w, 7>()),
                    9 => Some(self.run::<$w, 9>()),
                    10 => Some(self.run::<$w, 10>()),
                    11 => Some(self.run::<$w, 11>()),
                    12 => Some(self.run::<$w, 12>()),
                    13 => Some(self.run::<$w, 13>()),
                    _ => None,
                }
            };
        }
        if self.job.w.is_some() {
            widths!(true)
        } else {
            widths!(false)
        }
    }
}

/// One vector from the first eight values of `s`.
#[inline(always)]
fn load(s: &[f64]) -> __m512d {
    pulp::bytemuck::pod_read_unaligned(pulp::bytemuck::cast_slice(&s[..LANES]))
}

/// Stores `v` into the first eight values of `s` (at any alignment: a
/// cast of the slice to `__m512d` would demand 64 bytes).
#[inline(always)]
fn store(s: &mut [f64], v: __m512d) {
    s[..LANES].copy_from_slice(&pulp::bytemuck::cast::<__m512d, [f64; LANES]>(v));
}

/// Index of the entry `(a, b)`, `b <= a`, of a `k`-value lower triangle
/// stored column after column (for `b` past `k`, the number of entries:
/// the tiles of columns past `k`, never run, are still compiled in
/// profiles that keep dead branches).
const fn entry(k: usize, b: usize, a: usize) -> usize {
    let mut e = 0;
    let mut j = 0;
    while j < b && j < k {
        e += k - j;
        j += 1;
    }
    e + a.saturating_sub(b)
}

/// Columns of the tile that starts at column `b0` for `k` values, zero
/// when no tile starts there: tiles are taken from column 0 on, each as
/// many columns as keep its sums (`k - b` for column `b`) within
/// [`MAX_SUMS`], at least one (a first column of 16 values keeps 16).
const fn tile_width(k: usize, b0: usize) -> usize {
    let mut b = 0;
    while b < k {
        let mut w = 1;
        let mut sums = k - b;
        while b + w < k && sums + (k - b - w) <= MAX_SUMS {
            sums += k - b - w;
            w += 1;
        }
        if b == b0 {
            return w;
        }
        b += w;
    }
    0
}

/// Number of tiles of [`tile_width`] for `k` values.
const fn tile_count(k: usize) -> usize {
    tile_ordinal(k, k)
}

/// Number of tiles that start before column `b0` for `k` values.
const fn tile_ordinal(k: usize, b0: usize) -> usize {
    let mut b = 0;
    let mut t = 0;
    while b < k && b < b0 {
        b += tile_width(k, b);
        t += 1;
    }
    t
}

impl Lanes<'_, '_> {
    #[inline(always)]
    fn run<const WEIGHTED: bool, const K: usize>(&self) -> [[f64; NARROW]; NARROW] {
        let job = self.job;
        let p = K - 1;
        let mut sums = [[0.0f64; LANES]; ENTRIES];
        let mut cols = Columns([[0.0f64; LANES]; NARROW * GROUPS]);
        let mut i = self.r0;
        while i < self.r1 {
            let m = (self.r1 - i).min(LANES * GROUPS);
            let groups = m.div_ceil(LANES);
            for g in 0..groups {
                let first = i + g * LANES;
                let rows = (m - g * LANES).min(LANES);
                // Whole groups whose rows' values all lie in the design
                // take the straight path.
                if rows == LANES && group_end::<K>(first) <= job.data.len() {
                    self.fill::<WEIGHTED, K, true>(first, rows, &mut cols, g);
                } else {
                    self.fill::<WEIGHTED, K, false>(first, rows, &mut cols, g);
                }
            }
            i += m;
            // The next chunk's design rows, fetched while the products run
            // (they read only the first-level cache), a share after each
            // tile.
            self.tiles::<K>(&cols, groups, &mut sums, (i * p, LANES * GROUPS * p));
        }
        let mut out = [[0.0f64; NARROW]; NARROW];
        for b in 0..K {
            for a in b..K {
                let l = &sums[entry(K, b, a)];
                out[a][b] = ((l[0] + l[1]) + (l[2] + l[3])) + ((l[4] + l[5]) + (l[6] + l[7]));
            }
        }
        out
    }

    /// Transforms the `rows` (at most eight) rows from `first` into the
    /// column vectors of group `g` of the chunk: `sw * ((x - m) * inv)`
    /// for the design's columns and `sw * ((y - ym) * inv_sy)` for the
    /// target (the same operations as [`crate::prep::fill_tail`] and the
    /// other levels), lanes past `rows` zero.
    #[inline(always)]
    fn fill<const WEIGHTED: bool, const K: usize, const WHOLE: bool>(
        &self,
        first: usize,
        rows: usize,
        cols: &mut Columns,
        g: usize,
    ) {
        let a = self.v4.avx512f;
        let job = self.job;
        let p = K - 1;
        let data = job.data;
        let zero = a._mm512_setzero_pd();
        // Each row's first eight values and, past eight columns, the next
        // eight (values of the next rows beyond the row's end, ignored).
        let wide = p > LANES;
        let width = read_width::<K>();
        let mut lo = [zero; LANES];
        let mut hi = [zero; LANES];
        if WHOLE {
            let block = &data[first * p..group_end::<K>(first)];
            for r in 0..LANES {
                lo[r] = load(&block[r * p..]);
                if wide {
                    hi[r] = load(&block[r * p + LANES..]);
                }
            }
        } else {
            for r in 0..rows {
                let start = (first + r) * p;
                let mut padded = [0.0f64; 2 * LANES];
                let stop = (start + width).min(data.len());
                padded[..stop - start].copy_from_slice(&data[start..stop]);
                lo[r] = load(&padded);
                if wide {
                    hi[r] = load(&padded[LANES..]);
                }
            }
        }
        let lo = transpose(self.v4, lo);
        let hi = if wide { transpose(self.v4, hi) } else { lo };
        // Per-row vectors: the target and the square-root weights (zero
        // past `rows`), and the mask of the rows.
        let roots = match job.w {
            Some(w) if WEIGHTED => {
                a._mm512_sqrt_pd(a._mm512_div_pd(per_row(w, first, rows), a._mm512_set1_pd(job.ws)))
            }
            _ => zero,
        };
        let mask = {
            let mut m = [0.0f64; LANES];
            m[..rows.min(LANES)].fill(1.0);
            load(&m)
        };
        let target = a._mm512_mul_pd(
            a._mm512_sub_pd(per_row(job.y, first, rows), a._mm512_set1_pd(job.ym)),
            a._mm512_set1_pd(job.inv_sy),
        );
        // Written out column by column, so that the transposed rows stay
        // in registers (a loop over them was kept as a loop, through
        // memory).
        macro_rules! columns {
            ($($j:literal)*) => {
                $(
                    if $j < K {
                        let z = if $j < p {
                            let x = if $j < LANES { lo[$j % LANES] } else { hi[$j % LANES] };
                            a._mm512_mul_pd(
                                a._mm512_sub_pd(x, a._mm512_set1_pd(job.mean[$j])),
                                a._mm512_set1_pd(job.inv[$j]),
                            )
                        } else {
                            target
                        };
                        let z = if WEIGHTED { a._mm512_mul_pd(roots, z) } else { z };
                        // Exact: `z * 1 = z`; the lanes past `rows` become
                        // zeros (a whole group has none).
                        let z = if WHOLE { z } else { a._mm512_mul_pd(z, mask) };
                        store(&mut cols.0[$j * GROUPS + g], z);
                    }
                )*
            };
        }
        columns!(0 1 2 3 4 5 6 7 8 9 10 11 12 13 14 15);
    }

    /// Adds the products of the chunk's first `groups` groups to the lane
    /// sums, tile by tile (see [`tile_width`]), and prefetches the lines of
    /// `len` design values from `from` (the next chunk's rows), a share
    /// after each tile: spread over the products, the fetches proceed
    /// while the multiply-adds run (issued in one burst before them, they
    /// held the products back: at 10,000,000 x 10 on two threads the pass
    /// took 0.0349 s against 0.0330 s, medians of eight alternations).
    #[inline(always)]
    fn tiles<const K: usize>(
        &self,
        cols: &Columns,
        groups: usize,
        sums: &mut [[f64; LANES]; ENTRIES],
        (from, len): (usize, usize),
    ) {
        let count = const { tile_count(K) };
        let lines = len.div_ceil(LANES) + 1;
        macro_rules! tiles {
            ($($b:literal)*) => {
                $(
                    if const { tile_width(K, $b) } > 0 {
                        self.tile::<K, $b>(cols, groups, sums);
                        let t = const { tile_ordinal(K, $b) };
                        let mut l = t * lines / count;
                        while l < (t + 1) * lines / count {
                            prefetch(self.job.data, from + l * LANES);
                            l += 1;
                        }
                    }
                )*
            };
        }
        tiles!(0 1 2 3 4 5 6 7 8 9 10 11 12 13 14 15);
    }

    /// The tile of columns `B0..B0 + w`: the sums of entries `(a, b)` for
    /// `b` in the tile and `a` from `b` to `K`, in registers through the
    /// groups; column `b`'s vector held, each `a`'s loaded once a group.
    /// Index loops over constant bounds, which the optimiser unrolls so
    /// that the sums stay in registers (iterator chains here were kept as
    /// loops and spilled the sums: 12 ns a row instead of 5 in a trial).
    #[allow(clippy::needless_range_loop)]
    #[inline(always)]
    fn tile<const K: usize, const B0: usize>(
        &self,
        cols: &Columns,
        groups: usize,
        sums: &mut [[f64; LANES]; ENTRIES],
    ) {
        let a = self.v4.avx512f;
        let w = const { tile_width(K, B0) };
        let base = const { entry(K, B0, B0) };
        let count = const { entry(K, B0 + tile_width(K, B0), B0 + tile_width(K, B0)) }
            - const { entry(K, B0, B0) };
        let zero = a._mm512_setzero_pd();
        // At most `MAX_SUMS`, or one column's `K - B0` (up to 16).
        let mut t = [zero; NARROW];
        for e in 0..count {
            t[e] = load(&sums[base + e]);
        }
        for g in 0..groups {
            let mut vb = [zero; NARROW];
            for bi in 0..w {
                vb[bi] = load(&cols.0[(B0 + bi) * GROUPS + g]);
            }
            for r in B0..K {
                let va = load(&cols.0[r * GROUPS + g]);
                for bi in 0..w {
                    let b = B0 + bi;
                    if b <= r {
                        let e = entry(K, b, r) - base;
                        t[e] = a._mm512_fmadd_pd(va, vb[bi], t[e]);
                    }
                }
            }
        }
        for e in 0..count {
            store(&mut sums[base + e], t[e]);
        }
    }
}

/// Values read from each row's start for `K` values with the target
/// (`p = K - 1` columns): one vector, or two past eight columns.
const fn read_width<const K: usize>() -> usize {
    if K - 1 > LANES {
        2 * LANES
    } else {
        LANES
    }
}

/// End of the values read for the group of eight rows from `first`: the
/// straight path of [`Lanes::fill`] reads up to here.
#[inline(always)]
fn group_end<const K: usize>(first: usize) -> usize {
    (first + LANES - 1) * (K - 1) + read_width::<K>()
}

/// The eight values of `values` from `first`, the `rows` first of them
/// when fewer (the rest zero).
#[inline(always)]
fn per_row(values: &[f64], first: usize, rows: usize) -> __m512d {
    if rows == LANES {
        load(&values[first..])
    } else {
        let mut padded = [0.0f64; LANES];
        padded[..rows].copy_from_slice(&values[first..first + rows]);
        load(&padded)
    }
}

/// The 8 x 8 transpose: lane `q` of output `j` is lane `j` of input `q`.
#[inline(always)]
fn transpose(v4: V4, r: [__m512d; LANES]) -> [__m512d; LANES] {
    let a = v4.avx512f;
    // Pairs of rows interleaved: lanes (r0[2i], r1[2i]) and (r0[2i+1], r1[2i+1]).
    let t0 = a._mm512_unpacklo_pd(r[0], r[1]);
    let t1 = a._mm512_unpackhi_pd(r[0], r[1]);
    let t2 = a._mm512_unpacklo_pd(r[2], r[3]);
    let t3 = a._mm512_unpackhi_pd(r[2], r[3]);
    let t4 = a._mm512_unpacklo_pd(r[4], r[5]);
    let t5 = a._mm512_unpackhi_pd(r[4], r[5]);
    let t6 = a._mm512_unpacklo_pd(r[6], r[7]);
    let t7 = a._mm512_unpackhi_pd(r[6], r[7]);
    // Four rows of columns (j, j + 4): pairs of lanes from two inputs.
    let lo = a._mm512_setr_epi64(0, 1, 8, 9, 4, 5, 12, 13);
    let hi = a._mm512_setr_epi64(2, 3, 10, 11, 6, 7, 14, 15);
    let u0 = a._mm512_permutex2var_pd(t0, lo, t2);
    let u2 = a._mm512_permutex2var_pd(t0, hi, t2);
    let u1 = a._mm512_permutex2var_pd(t1, lo, t3);
    let u3 = a._mm512_permutex2var_pd(t1, hi, t3);
    let u4 = a._mm512_permutex2var_pd(t4, lo, t6);
    let u6 = a._mm512_permutex2var_pd(t4, hi, t6);
    let u5 = a._mm512_permutex2var_pd(t5, lo, t7);
    let u7 = a._mm512_permutex2var_pd(t5, hi, t7);
    // The halves of rows 0-3 and 4-7 joined.
    [
        a._mm512_shuffle_f64x2::<0x44>(u0, u4),
        a._mm512_shuffle_f64x2::<0x44>(u1, u5),
        a._mm512_shuffle_f64x2::<0x44>(u2, u6),
        a._mm512_shuffle_f64x2::<0x44>(u3, u7),
        a._mm512_shuffle_f64x2::<0xEE>(u0, u4),
        a._mm512_shuffle_f64x2::<0xEE>(u1, u5),
        a._mm512_shuffle_f64x2::<0xEE>(u2, u6),
        a._mm512_shuffle_f64x2::<0xEE>(u3, u7),
    ]
}

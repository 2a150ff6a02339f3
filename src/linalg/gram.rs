//! The rank-k update that accumulates a Gram matrix block by block.

use faer::linalg::matmul::matmul;
use faer::reborrow::ReborrowMut;
use faer::{Accum, MatMut, MatRef, Par};
use pulp::{bytemuck, Simd, WithSimd};

/// Columns per panel of [`lower_gram_add`].
const GRAM_PANEL: usize = 32;

/// `acc += z^T z` on and below the diagonal, by panels of [`GRAM_PANEL`]
/// columns: each panel is one general product of the columns from the
/// panel's first on with the panel's columns (faer's sequential kernel), so
/// only the diagonal blocks compute the part above the diagonal as well.
pub(crate) fn lower_gram_add(mut acc: MatMut<'_, f64>, z: MatRef<'_, f64>) {
    let k = z.ncols();
    let mut j0 = 0;
    while j0 < k {
        let w = GRAM_PANEL.min(k - j0);
        matmul(
            acc.rb_mut().submatrix_mut(j0, j0, k - j0, w),
            Accum::Add,
            z.subcols(j0, k - j0).transpose(),
            z.subcols(j0, w),
            1.0,
            Par::Seq,
        );
        j0 += w;
    }
}

/// Row strides of a block read by [`lower_gram_rows_add`] are whole
/// multiples of this many values (the widest vector).
const V: usize = 8;

/// Row stride of a block read by [`lower_gram_rows_add`] for `k` columns:
/// `k` rounded up to whole vectors of eight (the lanes past `k` are kept
/// zero by the caller).
pub(crate) fn gram_row_stride(k: usize) -> usize {
    k.div_ceil(V) * V
}

/// `acc += z^T z` on and below the diagonal (the part above is left as it
/// is, or changed where a tile crosses the diagonal), where `z` is a block
/// of `len` rows of `k` values stored row after row at stride `ld` (see
/// [`gram_row_stride`]), zeros in the lanes past `k`.
///
/// A kernel of our own, run at the widest instruction set present (see
/// [`crate::linalg::kernels`]): the lower triangle is cut into bands of two
/// vectors of rows (sixteen with AVX-512, eight with AVX2; a last band of
/// one vector), and each band into tiles of one vector of columns whose
/// sums over the block's rows stay in registers: per row, two loads of the
/// band's values and one broadcast per column of the tile. Unlike a general
/// product it reads the block where it lies (no packed copy) and forms only
/// the tiles that hold entries on or below the diagonal; a tile that
/// crosses it drops the vector wholly above. Each entry is summed over the
/// rows in order, one fused multiply-add per row (rounded once on every
/// level: the baseline's is the library's), then added to `acc`: the result
/// does not depend on the thread count or on the level.
pub(crate) fn lower_gram_rows_add(
    acc: MatMut<'_, f64>,
    z: &[f64],
    ld: usize,
    len: usize,
    k: usize,
) {
    debug_assert!(ld.is_multiple_of(V) && ld >= k && z.len() >= ld * len);
    debug_assert!(acc.nrows() == k && acc.ncols() == k);
    crate::linalg::kernels::dispatch_simd(Rows {
        z: &z[..ld * len],
        ld,
        k,
        acc,
    });
}

/// [`lower_gram_rows_add`] at `level`; `false` when the processor cannot
/// run it.
#[cfg(test)]
fn lower_gram_rows_add_at(
    level: crate::linalg::kernels::Level,
    acc: MatMut<'_, f64>,
    z: &[f64],
    ld: usize,
    len: usize,
    k: usize,
) -> bool {
    let job = Rows {
        z: &z[..ld * len],
        ld,
        k,
        acc,
    };
    crate::linalg::kernels::dispatch_simd_at(level, job).is_some()
}

/// The block [`lower_gram_rows_add`] reads, and the sums it adds to.
struct Rows<'a, 'b> {
    z: &'a [f64],
    ld: usize,
    k: usize,
    acc: MatMut<'b, f64>,
}

impl WithSimd for Rows<'_, '_> {
    type Output = ();

    #[inline(always)]
    fn with_simd<S: Simd>(mut self, simd: S) {
        // Tiles as wide as a vector; a band is two.
        match S::F64_LANES {
            8 => self.bands::<S, 8>(simd),
            4 => self.bands::<S, 4>(simd),
            _ => self.bands::<S, 1>(simd),
        }
    }
}

impl Rows<'_, '_> {
    /// Every band of `2 L` rows (a last band of `L`), tiles of `NR = L`
    /// columns, where `L` is the vector's lanes.
    #[inline(always)]
    fn bands<S: Simd, const NR: usize>(&mut self, simd: S) {
        let l = S::F64_LANES;
        debug_assert_eq!(l, NR);
        let k = self.k;
        let mut i0 = 0;
        while i0 < k {
            let two = k - i0 > l;
            // Wholly below the diagonal: every column before the band.
            let mut j0 = 0;
            while j0 < i0 {
                if two {
                    self.tile::<S, 2, NR>(simd, i0, j0);
                } else {
                    self.tile::<S, 1, NR>(simd, i0, j0);
                }
                j0 += NR;
            }
            // Across it: the first tile whole, the second without the
            // band's first vector (above the diagonal).
            if two {
                self.tile::<S, 2, NR>(simd, i0, i0);
                self.tile::<S, 1, NR>(simd, i0 + l, i0 + NR);
            } else {
                self.tile::<S, 1, NR>(simd, i0, i0);
            }
            i0 += if two { 2 * l } else { l };
        }
    }

    /// `acc[i0 + a, j0 + c] += sum_r z[r, i0 + a] z[r, j0 + c]` for `a`
    /// below `MV` vectors and `c < NR` (entries past `k` are not stored).
    #[inline(always)]
    fn tile<S: Simd, const MV: usize, const NR: usize>(&mut self, simd: S, i0: usize, j0: usize) {
        let l = S::F64_LANES;
        // `bands` keeps both ranges inside a row (`ld` is whole vectors).
        assert!(i0 + MV * l <= self.ld && j0 + NR <= self.ld);
        let zero = simd.splat_f64s(0.0);
        let mut t = [[zero; MV]; NR];
        for row in self.z.chunks_exact(self.ld) {
            let a = &row[i0..i0 + MV * l];
            let b = &row[j0..j0 + NR];
            let mut av = [zero; MV];
            for (v, dst) in av.iter_mut().enumerate() {
                *dst = bytemuck::pod_read_unaligned(bytemuck::cast_slice(&a[v * l..(v + 1) * l]));
            }
            for (tc, &bc) in t.iter_mut().zip(b) {
                let bv = simd.splat_f64s(bc);
                for (tv, &avv) in tc.iter_mut().zip(&av) {
                    *tv = simd.mul_add_f64s(avv, bv, *tv);
                }
            }
        }
        // Stored by value with constant indices (loops of fixed length,
        // unrolled): `t` is never borrowed, so it stays in registers
        // through the loop above instead of being stored on every row.
        let mut all = [[0.0f64; 2 * V]; NR];
        for c in 0..NR {
            for v in 0..MV {
                simd.partial_store_f64s(&mut all[c][v * l..(v + 1) * l], t[c][v]);
            }
        }
        let k = self.k;
        for (c, sums) in all.iter().enumerate() {
            let j = j0 + c;
            if j >= k {
                break;
            }
            for (a, &s) in sums[..MV * l].iter().enumerate() {
                let i = i0 + a;
                if i < k {
                    self.acc[(i, j)] += s;
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::linalg::kernels::Level;
    use faer::Mat;

    /// The row kernel against sums written out, at every level this
    /// processor runs (bit for bit the same at each), for every width up
    /// to 70 (every band and tail shape of each level) and a few wider,
    /// with rows that are not a multiple of anything; the entries above the
    /// diagonal that no tile reaches keep their value.
    #[test]
    fn row_kernel_matches_direct_sums() {
        let mut seed = 0x2545_f491_4f6c_dd1du64;
        let mut next = move || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let widths: Vec<usize> = (1..=70).chain([101, 128, 129]).collect();
        for &k in &widths {
            for len in [1usize, 5, 67] {
                let ld = gram_row_stride(k);
                let mut z = vec![0.0; ld * len];
                for r in 0..len {
                    for c in 0..k {
                        z[r * ld + c] = next() * 8.0;
                    }
                }
                let start = Mat::<f64>::from_fn(k, k, |i, j| (i * k + j) as f64);
                let mut first: Option<Mat<f64>> = None;
                for level in Level::ALL {
                    let mut acc = start.clone();
                    if !lower_gram_rows_add_at(level, acc.as_mut(), &z, ld, len, k) {
                        continue;
                    }
                    // Every level gives the same bits on and below the
                    // diagonal (the same sums in the same order).
                    match &first {
                        None => first = Some(acc.clone()),
                        Some(f) => {
                            for j in 0..k {
                                for i in j..k {
                                    assert_eq!(
                                        acc[(i, j)].to_bits(),
                                        f[(i, j)].to_bits(),
                                        "{level:?} k {k} rows {len} ({i}, {j})"
                                    );
                                }
                            }
                        }
                    }
                    for j in 0..k {
                        for i in j..k {
                            let (mut s, mut mag) = (0.0f64, 0.0f64);
                            for r in 0..len {
                                let t = z[r * ld + i] * z[r * ld + j];
                                s += t;
                                mag += t.abs();
                            }
                            let want = start[(i, j)] + s;
                            let got = acc[(i, j)];
                            assert!(
                                (got - want).abs() <= 1e-14 * (mag + start[(i, j)].abs()),
                                "{level:?} k {k} rows {len} entry ({i}, {j}): {got} vs {want}"
                            );
                        }
                    }
                    // Above the diagonal, past the tiles that cross it.
                    let l = match level {
                        Level::V4 => 8,
                        Level::V3 => 4,
                        Level::Scalar => 1,
                    };
                    for j in 0..k {
                        for i in 0..j {
                            if j / (2 * l) > i / (2 * l) {
                                assert_eq!(
                                    acc[(i, j)],
                                    start[(i, j)],
                                    "{level:?} k {k} ({i}, {j})"
                                );
                            }
                        }
                    }
                }
            }
        }
    }
}

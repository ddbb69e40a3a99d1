//! Small dense factorizations that work in place on preallocated buffers.
//!
//! Written by hand because the control step must not allocate: nalgebra's QR, Cholesky and LU
//! take ownership of their input and allocate their outputs on every call, and the matrices here
//! are tiny (at most the 18–24 DOF of a legged robot) and change size with the number of stance
//! feet, so each function works on the top-left `rows × cols` block of a larger buffer.
//! Algorithms: Golub & Van Loan, "Matrix Computations" (4th ed., 2013): Householder QR
//! (alg. 5.2.1), Cholesky (alg. 4.2.1), Gaussian elimination with partial pivoting (alg. 3.4.1).

use nalgebra::{DMatrix, DVector};

/// Householder QR of the top-left `m × n` block of `a` (m ≥ n). On return `a`'s upper `n × n`
/// triangle holds R, `q` (at least m × m) holds the full orthogonal Q with A = Q [R; 0], and
/// `v` (at least m × n) holds the Householder vectors. Returns the smallest |R_jj|, for rank
/// checks.
pub fn householder_qr(
    a: &mut DMatrix<f64>,
    m: usize,
    n: usize,
    q: &mut DMatrix<f64>,
    v: &mut DMatrix<f64>,
) -> f64 {
    debug_assert!(m >= n && q.nrows() >= m && q.ncols() >= m && v.nrows() >= m && v.ncols() >= n);
    // Column-major slices: column c of a matrix with `ld` rows starts at c · ld. Columns are
    // contiguous, so every inner loop below runs over one contiguous stretch.
    let (lda, ldq, ldv) = (a.nrows(), q.nrows(), v.nrows());
    let a = a.as_mut_slice();
    let q = q.as_mut_slice();
    let v = v.as_mut_slice();
    let mut min_diag = f64::INFINITY;
    for j in 0..n {
        let aj = &a[j * lda..j * lda + m];
        let norm = aj[j..].iter().map(|x| x * x).sum::<f64>().sqrt();
        let x0 = aj[j];
        let alpha = if x0 >= 0.0 { -norm } else { norm };
        // v = x − α e₁, normalised; skip when the column is already zero below the diagonal.
        let vj = &mut v[j * ldv..j * ldv + m];
        vj[..j].fill(0.0);
        vj[j] = x0 - alpha;
        vj[j + 1..].copy_from_slice(&aj[j + 1..]);
        let vnorm2: f64 = vj[j..].iter().map(|x| x * x).sum();
        if vnorm2 > 0.0 {
            let inv = 1.0 / vnorm2.sqrt();
            vj[j..].iter_mut().for_each(|x| *x *= inv);
            // A[j.., j..] −= 2 v (vᵀ A[j.., j..])
            let vj = &v[j * ldv + j..j * ldv + m];
            for c in j..n {
                let col = &mut a[c * lda + j..c * lda + m];
                let dot: f64 = vj.iter().zip(col.iter()).map(|(x, y)| x * y).sum();
                col.iter_mut()
                    .zip(vj)
                    .for_each(|(y, x)| *y -= 2.0 * dot * x);
            }
        }
        min_diag = min_diag.min(a[j * lda + j].abs());
    }
    // Q = H₀ H₁ … H_{n−1} applied to the identity, last reflector first.
    for c in 0..m {
        let col = &mut q[c * ldq..c * ldq + m];
        col.fill(0.0);
        col[c] = 1.0;
    }
    for j in (0..n).rev() {
        let vj = &v[j * ldv + j..j * ldv + m];
        for c in 0..m {
            let col = &mut q[c * ldq + j..c * ldq + m];
            let dot: f64 = vj.iter().zip(col.iter()).map(|(x, y)| x * y).sum();
            if dot != 0.0 {
                col.iter_mut()
                    .zip(vj)
                    .for_each(|(y, x)| *y -= 2.0 * dot * x);
            }
        }
    }
    if n == 0 { 0.0 } else { min_diag }
}

/// Solve R x = b in place (R upper triangular, top-left n × n of `r`).
pub fn solve_upper(r: &DMatrix<f64>, n: usize, b: &mut [f64]) {
    for i in (0..n).rev() {
        let mut s = b[i];
        for k in i + 1..n {
            s -= r[(i, k)] * b[k];
        }
        b[i] = s / r[(i, i)];
    }
}

/// Solve Rᵀ x = b in place (R upper triangular).
pub fn solve_upper_transposed(r: &DMatrix<f64>, n: usize, b: &mut [f64]) {
    for i in 0..n {
        let mut s = b[i];
        for k in 0..i {
            s -= r[(k, i)] * b[k];
        }
        b[i] = s / r[(i, i)];
    }
}

/// Cholesky factorization in place of the top-left n × n block (lower triangle L with
/// A = L Lᵀ written over it). Returns false if the block is not positive definite. Works on
/// contiguous column slices (column-major; Golub & Van Loan alg. 4.2.2, the gaxpy form by
/// columns), skipping zero multipliers, so a block-diagonal matrix costs its blocks.
pub fn cholesky_in_place(a: &mut DMatrix<f64>, n: usize) -> bool {
    cholesky_in_place_at(a, 0, n)
}

/// [`cholesky_in_place`] on the n × n diagonal block whose top-left entry is (off, off): one
/// diagonal block of a block-diagonal matrix factorised on its own (the same operations, in
/// the same order, as the whole matrix's factorisation spends on that block).
pub fn cholesky_in_place_at(a: &mut DMatrix<f64>, off: usize, n: usize) -> bool {
    let ld = a.nrows();
    let a = a.as_mut_slice();
    let end = off + n;
    for j in off..end {
        // Column j −= Σ_{k<j} L[j,k] · column k (rows j..end).
        for k in off..j {
            let ljk = a[k * ld + j];
            if ljk != 0.0 {
                let (head, tail) = a.split_at_mut(j * ld);
                let ck = &head[k * ld + j..k * ld + end];
                let cj = &mut tail[j..end];
                cj.iter_mut().zip(ck).for_each(|(y, x)| *y -= ljk * x);
            }
        }
        let d = a[j * ld + j];
        if d <= 0.0 || !d.is_finite() {
            return false;
        }
        let d = d.sqrt();
        let inv = 1.0 / d;
        let cj = &mut a[j * ld + j..j * ld + end];
        cj[0] = d;
        cj[1..].iter_mut().for_each(|x| *x *= inv);
    }
    true
}

/// The smallest diagonal entry of a Cholesky factor's top-left n × n block (the smallest |R_jj|
/// of the QR of the factored matrix's square root, for rank checks); ∞ for n = 0.
pub fn min_pivot(l: &DMatrix<f64>, n: usize) -> f64 {
    (0..n).map(|i| l[(i, i)]).fold(f64::INFINITY, f64::min)
}

/// Solve L Lᵀ x = b in place with the factor from [`cholesky_in_place`] (column slices; zero
/// entries of the factor cost nothing).
pub fn cholesky_solve(l: &DMatrix<f64>, n: usize, b: &mut [f64]) {
    cholesky_solve_at(l, 0, n, b);
}

/// [`cholesky_solve`] with the factor of the diagonal block at (off, off) from
/// [`cholesky_in_place_at`]; `b` holds that block's n entries.
pub fn cholesky_solve_at(l: &DMatrix<f64>, off: usize, n: usize, b: &mut [f64]) {
    let ld = l.nrows();
    let l = l.as_slice();
    let at = |j: usize| (off + j) * ld + off;
    if n == 3 {
        // One foot's block, unrolled: the same operations in the same order as the loops
        // below (a zero multiplier subtracts an exact zero; a sum starts from the empty sum).
        let (c0, c1, c2) = (at(0), at(1), at(2));
        let y0 = b[0] / l[c0];
        let y1 = (b[1] - y0 * l[c0 + 1]) / l[c1 + 1];
        let y2 = ((b[2] - y0 * l[c0 + 2]) - y1 * l[c1 + 2]) / l[c2 + 2];
        let empty: f64 = std::iter::empty::<f64>().sum();
        let x2 = (y2 - empty) / l[c2 + 2];
        let x1 = (y1 - (empty + x2 * l[c1 + 2])) / l[c1 + 1];
        let x0 = (y0 - ((empty + x1 * l[c0 + 1]) + x2 * l[c0 + 2])) / l[c0];
        b[0] = x0;
        b[1] = x1;
        b[2] = x2;
        return;
    }
    // L y = b by columns.
    for j in 0..n {
        let cj = &l[at(j) + j..at(j) + n];
        let yj = b[j] / cj[0];
        b[j] = yj;
        if yj != 0.0 {
            b[j + 1..n]
                .iter_mut()
                .zip(&cj[1..])
                .for_each(|(y, x)| *y -= yj * x);
        }
    }
    // Lᵀ x = y: row i of Lᵀ is column i of L.
    for i in (0..n).rev() {
        let ci = &l[at(i) + i..at(i) + n];
        let s: f64 = b[i + 1..n].iter().zip(&ci[1..]).map(|(x, y)| x * y).sum();
        b[i] = (b[i] - s) / ci[0];
    }
}

/// Solve A x = b in place by Gaussian elimination with partial pivoting on the top-left n × n
/// block of `a` (destroyed). Returns false when a pivot is (numerically) zero.
pub fn lu_solve_in_place(a: &mut DMatrix<f64>, n: usize, b: &mut [f64]) -> bool {
    let scale = (0..n)
        .flat_map(|i| (0..n).map(move |j| (i, j)))
        .map(|(i, j)| a[(i, j)].abs())
        .fold(0.0, f64::max);
    for k in 0..n {
        let mut p = k;
        for i in k + 1..n {
            if a[(i, k)].abs() > a[(p, k)].abs() {
                p = i;
            }
        }
        if a[(p, k)].abs() <= 1e-14 * scale.max(1e-300) {
            return false;
        }
        if p != k {
            for c in 0..n {
                let t = a[(k, c)];
                a[(k, c)] = a[(p, c)];
                a[(p, c)] = t;
            }
            b.swap(k, p);
        }
        let pivot = a[(k, k)];
        for i in k + 1..n {
            let f = a[(i, k)] / pivot;
            if f != 0.0 {
                for c in k + 1..n {
                    a[(i, c)] -= f * a[(k, c)];
                }
                b[i] -= f * b[k];
            }
            a[(i, k)] = 0.0;
        }
    }
    for i in (0..n).rev() {
        let mut s = b[i];
        for c in i + 1..n {
            s -= a[(i, c)] * b[c];
        }
        b[i] = s / a[(i, i)];
    }
    true
}

/// y = A x for the top-left rows × cols block (no allocation).
pub fn mat_vec(a: &DMatrix<f64>, rows: usize, cols: usize, x: &[f64], y: &mut [f64]) {
    for r in 0..rows {
        let mut s = 0.0;
        for c in 0..cols {
            s += a[(r, c)] * x[c];
        }
        y[r] = s;
    }
}

/// Copy of a slice into the first entries of a vector.
pub fn copy_into(dst: &mut DVector<f64>, src: &[f64]) {
    dst.as_mut_slice()[..src.len()].copy_from_slice(src);
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Entries from splitmix64: full rank with probability one (a smooth formula such as
    /// sin(a i + b j) would give a rank-2 matrix).
    fn test_matrix(m: usize, n: usize, seed: f64) -> DMatrix<f64> {
        let mut state = seed.to_bits();
        DMatrix::from_fn(m, n, |_, _| {
            state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = state;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^= z >> 31;
            (z >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        })
    }

    #[test]
    fn qr_reconstructs_and_is_orthogonal() {
        let (m, n) = (18, 9);
        let a0 = test_matrix(m, n, 0.3);
        let mut a = DMatrix::zeros(24, 12);
        a.view_mut((0, 0), (m, n)).copy_from(&a0);
        let mut q = DMatrix::zeros(24, 24);
        let mut v = DMatrix::zeros(24, 12);
        let min_diag = householder_qr(&mut a, m, n, &mut q, &mut v);
        assert!(min_diag > 1e-6);
        let qm = q.view((0, 0), (m, m)).into_owned();
        assert!((qm.transpose() * &qm - DMatrix::identity(m, m)).amax() < 1e-14);
        let mut r = DMatrix::zeros(m, n);
        for i in 0..n {
            for j in i..n {
                r[(i, j)] = a[(i, j)];
            }
        }
        assert!((&qm * r - a0).amax() < 1e-13);
    }

    #[test]
    fn solvers_match_nalgebra() {
        let n = 7;
        let g = test_matrix(n, n, 1.1);
        let spd = &g * g.transpose() + DMatrix::identity(n, n);
        let b: Vec<f64> = (0..n).map(|i| (i as f64).cos()).collect();
        let expect = spd
            .clone()
            .lu()
            .solve(&DVector::from_vec(b.clone()))
            .unwrap();
        let mut l = spd.clone();
        assert!(cholesky_in_place(&mut l, n));
        let mut x = b.clone();
        cholesky_solve(&l, n, &mut x);
        assert!((DVector::from_vec(x) - &expect).amax() < 1e-12);
        let mut a = g.clone();
        let mut x = b.clone();
        assert!(lu_solve_in_place(&mut a, n, &mut x));
        let expect = g.clone().lu().solve(&DVector::from_vec(b.clone())).unwrap();
        assert!((DVector::from_vec(x) - expect).amax() < 1e-11);
        let mut singular = DMatrix::zeros(3, 3);
        singular[(0, 0)] = 1.0;
        let mut y = vec![1.0, 1.0, 1.0];
        assert!(!lu_solve_in_place(&mut singular, 3, &mut y));
    }
}

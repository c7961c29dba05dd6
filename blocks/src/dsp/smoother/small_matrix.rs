//! Small square matrices (2 x 2 and 3 x 3) for the smoother's filter, on
//! the stack: the model's states are two or three.

pub(super) type Mat<const N: usize> = [[f64; N]; N];
pub(super) type M3 = Mat<3>;

/// The leading `N` x `N` block of a 3 x 3 matrix.
pub(super) fn leading<const N: usize>(a: &M3) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| a[i][j]))
}

pub(super) fn mat_mul<const N: usize>(a: &Mat<N>, b: &Mat<N>) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| (0..N).map(|k| a[i][k] * b[k][j]).sum()))
}
pub(super) fn mat_vec<const N: usize>(a: &Mat<N>, x: &[f64; N]) -> [f64; N] {
    std::array::from_fn(|i| (0..N).map(|k| a[i][k] * x[k]).sum())
}
pub(super) fn transpose<const N: usize>(a: &Mat<N>) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| a[j][i]))
}
pub(super) fn add<const N: usize>(a: &Mat<N>, b: &Mat<N>) -> Mat<N> {
    std::array::from_fn(|i| std::array::from_fn(|j| a[i][j] + b[i][j]))
}
/// Inverse of a 2 x 2 or 3 x 3 matrix; `None` when it is singular.
pub(super) fn invert<const N: usize>(a: &Mat<N>) -> Option<Mat<N>> {
    let mut inv = [[0.0; N]; N];
    if N == 2 {
        let det = a[0][0] * a[1][1] - a[0][1] * a[1][0];
        if det.abs() < 1e-300 || !det.is_finite() {
            return None;
        }
        inv[0][0] = a[1][1] / det;
        inv[0][1] = -a[0][1] / det;
        inv[1][0] = -a[1][0] / det;
        inv[1][1] = a[0][0] / det;
        return Some(inv);
    }
    let cof = |i: usize, j: usize| {
        let (r0, r1) = ((i + 1) % 3, (i + 2) % 3);
        let (c0, c1) = ((j + 1) % 3, (j + 2) % 3);
        a[r0][c0] * a[r1][c1] - a[r0][c1] * a[r1][c0]
    };
    let det = a[0][0] * cof(0, 0) + a[0][1] * cof(0, 1) + a[0][2] * cof(0, 2);
    if det.abs() < 1e-300 || !det.is_finite() {
        return None;
    }
    for (i, row) in inv.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = cof(j, i) / det;
        }
    }
    Some(inv)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn three_by_three_inverse() {
        let a = [[4.0, 1.0, 0.5], [1.0, 3.0, 0.2], [0.5, 0.2, 2.0]];
        let inv = invert(&a).unwrap();
        let i = mat_mul(&a, &inv);
        for (r, row) in i.iter().enumerate() {
            for (c, v) in row.iter().enumerate() {
                assert!((v - if r == c { 1.0 } else { 0.0 }).abs() < 1e-12);
            }
        }
    }
}

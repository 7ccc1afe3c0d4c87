//! Small dense linear systems, solved in place on the stack.

/// Solves the leading `n`×`n` system `m·x = r` (n ≤ N) by Gaussian elimination with partial
/// pivoting; entries beyond `n` are ignored and returned as 0. `None` when the system is
/// singular or the solution is not finite.
pub(crate) fn solve<const N: usize>(
    mut m: [[f64; N]; N],
    mut r: [f64; N],
    n: usize,
) -> Option<[f64; N]> {
    for c in 0..n {
        let p = (c..n).max_by(|&a, &b| m[a][c].abs().total_cmp(&m[b][c].abs()))?;
        if m[p][c].abs() < 1e-300 {
            return None;
        }
        m.swap(c, p);
        r.swap(c, p);
        let pivot = m[c];
        for i in c + 1..n {
            let f = m[i][c] / pivot[c];
            for (mij, pj) in m[i].iter_mut().zip(pivot).skip(c).take(n - c) {
                *mij -= f * pj;
            }
            r[i] -= f * r[c];
        }
    }
    let mut x = [0.0; N];
    for i in (0..n).rev() {
        let s: f64 = (i + 1..n).map(|j| m[i][j] * x[j]).sum();
        x[i] = (r[i] - s) / m[i][i];
    }
    x.iter().all(|v| v.is_finite()).then_some(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_pivoted_system_is_solved_and_a_singular_one_refused() {
        // 0·x + y = 2, x + y = 3 needs a row swap: x = 1, y = 2.
        let x = solve([[0.0, 1.0], [1.0, 1.0]], [2.0, 3.0], 2).unwrap();
        assert!((x[0] - 1.0).abs() < 1e-12 && (x[1] - 2.0).abs() < 1e-12);
        assert_eq!(solve([[1.0, 2.0], [2.0, 4.0]], [1.0, 2.0], 2), None);
        // Only the leading 1×1 block of a larger array.
        let x = solve([[4.0, 9.0], [9.0, 9.0]], [2.0, 9.0], 1).unwrap();
        assert_eq!(x, [0.5, 0.0]);
    }
}

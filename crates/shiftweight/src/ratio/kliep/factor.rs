//! The updatable Cholesky factor of the free block used by the active-set steps of [`super::sqp`].

/// The Cholesky factor L (lower triangular, row-major) of A + ridge I for the free block of the
/// active-set method, kept in step with the free set: freeing a column appends a row to L
/// (one forward substitution, O(k^2)), fixing one deletes its row and restores the triangle with
/// Givens rotations (O(k^2); Golub & Van Loan 2013, section 6.5.4), so each step of the method
/// costs O(k^2) instead of a fresh O(k^3) factorisation. Single-threaded: the blocks are at
/// most b x b.
pub(super) struct Cholesky {
    /// Rows of L; row i holds its first i + 1 entries.
    pub(super) rows: Vec<Vec<f64>>,
    pub(super) ridge: f64,
}

impl Cholesky {
    /// Factorises A + ridge I for the k x k matrix with entries `a(i, j)` (only i >= j is read);
    /// None at a pivot that is not positive.
    pub(super) fn factor(k: usize, a: impl Fn(usize, usize) -> f64, ridge: f64) -> Option<Self> {
        let mut f = Cholesky {
            rows: Vec::with_capacity(k),
            ridge,
        };
        for i in 0..k {
            let col: Vec<f64> = (0..i).map(|j| a(i, j)).collect();
            if !f.append(&col, a(i, i)) {
                return None;
            }
        }
        Some(f)
    }

    /// Appends a last row and column with off-diagonal entries `col` (against the current
    /// rows, in order) and diagonal `diag`; false (factor unchanged) if the new pivot is not
    /// positive.
    pub(super) fn append(&mut self, col: &[f64], diag: f64) -> bool {
        debug_assert_eq!(col.len(), self.rows.len());
        let mut w = self.forward(col);
        let d2 = diag + self.ridge - w.iter().map(|v| v * v).sum::<f64>();
        if !(d2 > 0.0 && d2.is_finite()) {
            return false;
        }
        w.push(d2.sqrt());
        self.rows.push(w);
        true
    }

    /// Deletes row and column `i` of A.
    pub(super) fn remove(&mut self, i: usize) {
        self.rows.remove(i);
        // Rows i.. now have one entry past the diagonal (column p + 1 for row p); rotate
        // columns (p, p + 1) to zero it, top to bottom.
        for p in i..self.rows.len() {
            let (a, b) = (self.rows[p][p], self.rows[p][p + 1]);
            let r = a.hypot(b);
            let (c, s) = if r > 0.0 { (a / r, b / r) } else { (1.0, 0.0) };
            for row in self.rows[p..].iter_mut() {
                let (x, y) = (row[p], row[p + 1]);
                row[p] = c * x + s * y;
                row[p + 1] = -s * x + c * y;
            }
            self.rows[p][p] = r;
            self.rows[p].truncate(p + 1);
        }
    }

    /// Solves L v = rhs by forward substitution. O(k^2).
    pub(super) fn forward(&self, rhs: &[f64]) -> Vec<f64> {
        let mut v = Vec::with_capacity(self.rows.len() + 1);
        for (i, row) in self.rows.iter().enumerate() {
            let s: f64 = row[..i].iter().zip(&v).map(|(l, v)| l * v).sum();
            v.push((rhs[i] - s) / row[i]);
        }
        v
    }

    /// Solves (A + ridge I) z = rhs: L v = rhs, then L' z = v. O(k^2).
    pub(super) fn solve(&self, rhs: &[f64]) -> Vec<f64> {
        let k = self.rows.len();
        let mut v = self.forward(rhs);
        for i in (0..k).rev() {
            let vi = v[i] / self.rows[i][i];
            v[i] = vi;
            for (j, l) in self.rows[i][..i].iter().enumerate() {
                v[j] -= l * vi;
            }
        }
        v
    }
}

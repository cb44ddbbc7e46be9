//! Small dense linear algebra shared by the PCA and the spectral start.

/// One cyclic sweep of Jacobi rotations over every off-diagonal pair (p, q) of the symmetric
/// matrix `a` (rows of equal length), each rotation zeroing `a[p][q]` and being accumulated into
/// the columns of `v` (Golub and Van Loan, "Matrix Computations", 4th ed., 8.5.2-8.5.3).
pub fn jacobi_sweep<R: AsRef<[f64]> + AsMut<[f64]>>(a: &mut [R], v: &mut [R]) {
    let n = a.len();
    for p in 0..n {
        for q in p + 1..n {
            let apq = a[p].as_ref()[q];
            if apq.abs() <= 1e-300 {
                continue;
            }
            let theta = (a[q].as_ref()[q] - a[p].as_ref()[p]) / (2.0 * apq);
            let t = theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt());
            let t = if theta == 0.0 { 1.0 } else { t };
            let c = 1.0 / (t * t + 1.0).sqrt();
            let s = t * c;
            for row in a.iter_mut() {
                let row = row.as_mut();
                let (akp, akq) = (row[p], row[q]);
                row[p] = c * akp - s * akq;
                row[q] = s * akp + c * akq;
            }
            {
                let (head, tail) = a.split_at_mut(q);
                let (rp, rq) = (head[p].as_mut(), tail[0].as_mut());
                for k in 0..n {
                    let (apk, aqk) = (rp[k], rq[k]);
                    rp[k] = c * apk - s * aqk;
                    rq[k] = s * apk + c * aqk;
                }
            }
            for row in v.iter_mut() {
                let row = row.as_mut();
                let (vp, vq) = (row[p], row[q]);
                row[p] = c * vp - s * vq;
                row[q] = s * vp + c * vq;
            }
        }
    }
}

//! The null distribution of the one-sample two-sided Kolmogorov-Smirnov statistic
//! D_n = sup_u |F_n(u) - u| of n independent uniforms, for every n and x.
//!
//! [`kolmogorov_sf`] returns P(D_n >= x). No single formula is both accurate and cheap over the
//! whole (n, x) plane, so the plane is split as recommended by Simard & L'Ecuyer (2011,
//! "Computing the two-sided Kolmogorov-Smirnov distribution", J. Statistical Software 39(11)),
//! with t = n x:
//!
//! | region | method | cost |
//! |---|---|---|
//! | t <= 1/2 | P = 1 | O(1) |
//! | 1/2 < t <= 1 | P(D_n < x) = n!/n^n (2t - 1)^n (Ruben & Gambino 1982) | O(1) |
//! | t >= n - 1 | P = 2 (1 - x)^n (Ruben & Gambino 1982) | O(1) |
//! | x >= 1/2 | P = 2 P(D_n^+ >= x), exact here (Miller 1956) | O(n) |
//! | n <= 140, n x^2 < 0.754693 | 1 - exact cdf, Durbin's matrix (Marsaglia, Tsang & Wang 2003) | O(t^3 log n) |
//! | n <= 140, n x^2 < 4 | 1 - exact cdf, Pomeranz's (1974) recursion | O(n t^2) |
//! | n <= 140, otherwise | 2 P(D_n^+ >= x) (Miller 1956) | O(n) |
//! | n > 140, n x^2 >= 2.2 | 2 P(D_n^+ >= x) (Miller 1956) | O(n) |
//! | n > 140, n <= 100,000 and n x^1.5 < 1.4 | 1 - Durbin's matrix (k <= 58) | O(k^3 log n) = O(n log n) |
//! | n > 140, otherwise | 1 - the Pelz & Good (1976) asymptotic series in 1/sqrt(n) | O(1) |
//!
//! The one-sided tail is the Smirnov (1944) / Birnbaum & Tingey (1951) sum
//! P(D_n^+ >= x) = x sum_{j=0}^{floor(n(1-x))} C(n, j) (x + j/n)^(j-1) (1 - x - j/n)^(n-j),
//! whose terms are all positive; each term is x / p_j times a binomial probability at
//! p_j = x + j/n, evaluated in log space with the saddle-point form of Loader (2000, "Fast and
//! accurate computation of binomial probabilities"), so no factorial overflows and small tails
//! keep their relative accuracy. Miller's approximation 2 P(D_n^+ >= x) is too large by
//! P(D_n^+ >= x, D_n^- >= x), about e^(-6 n x^2) relative by the leading terms of Kolmogorov's
//! series, i.e. below 2e-6 where it is used (n x^2 >= 2.2).
//! Durbin's matrix power is computed by repeated squaring with a separate power-of-two exponent;
//! Pomeranz's recursion is rescaled as it runs. The largest matrix is 2k - 1 = 115 rows
//! (k = ceil(n x) <= 1.4^(2/3) n^(1/3) at n = 100,000); above that size only the O(1) series and
//! the O(n) positive sum are used, so no branch costs more than O(n log n) (measured with the
//! dev-profile Python extension: about 0.1 s at n = 10^6 in the O(n) tail, under 1 ms elsewhere).
//!
//! These are the regions and thresholds of scipy.stats.kstwo, which the tests check against.

use std::f64::consts::PI;

/// P(D_n >= x) for the two-sided one-sample Kolmogorov-Smirnov statistic with `n` observations
/// from a continuous distribution (see the module docs for the method used where). Returns NaN
/// for n = 0 or a NaN x.
pub fn kolmogorov_sf(n: u64, x: f64) -> f64 {
    if n == 0 || x.is_nan() {
        return f64::NAN;
    }
    if x >= 1.0 {
        return 0.0;
    }
    let nf = n as f64;
    let t = nf * x;
    if t <= 0.5 {
        return 1.0;
    }
    if t <= 1.0 {
        // Ruben & Gambino (1982): P(D_n < x) = n!/n^n (2t - 1)^n for 1/(2n) <= x <= 1/n.
        let log_cdf = ln_factorial_over_power(n) + nf * (2.0 * t - 1.0).ln();
        return clip(-log_cdf.exp_m1());
    }
    if t >= nf - 1.0 {
        // Ruben & Gambino (1982): P(D_n >= x) = 2 (1 - x)^n for 1 - 1/n <= x <= 1.
        return clip(2.0 * (nf * (-x).ln_1p()).exp());
    }
    if x >= 0.5 {
        // D_n^+ and D_n^- cannot both reach x >= 1/2: the Miller relation is exact.
        return clip(2.0 * smirnov_sf(n, x));
    }
    let nxx = t * x;
    if n <= 140 {
        if nxx < 0.754_693 {
            return clip(1.0 - durbin_cdf(n, x));
        }
        if nxx < 4.0 {
            return clip(1.0 - pomeranz_cdf(n, x));
        }
        return clip(2.0 * smirnov_sf(n, x));
    }
    if nxx >= 2.2 {
        return clip(2.0 * smirnov_sf(n, x));
    }
    let cdf = if n <= 100_000 && nf * x.powf(1.5) < 1.4 {
        durbin_cdf(n, x)
    } else {
        pelz_good_cdf(n, x)
    };
    clip(1.0 - cdf)
}

fn clip(p: f64) -> f64 {
    p.clamp(0.0, 1.0)
}

/// Stirling's error ln(k!) - ln(sqrt(2 pi k) (k/e)^k) for k >= 1 (Loader 2000).
fn stirling_error(k: u64) -> f64 {
    let kf = k as f64;
    if k <= 15 {
        // k! is exact in f64 up to 22!.
        let fact: f64 = (1..=k).map(|i| i as f64).product();
        return fact.ln() - (kf + 0.5) * kf.ln() + kf - 0.5 * (2.0 * PI).ln();
    }
    // Asymptotic series 1/(12k) - 1/(360k^3) + 1/(1260k^5) - 1/(1680k^7) + 1/(1188k^9); the next
    // term is below 1e-16 for k >= 16.
    let k2 = kf * kf;
    (1.0 / 12.0
        - (1.0 / 360.0 - (1.0 / 1260.0 - (1.0 / 1680.0 - 1.0 / (1188.0 * k2)) / k2) / k2) / k2)
        / kf
}

/// ln(n! / n^n) = -n + ln(sqrt(2 pi n)) + stirling_error(n), without cancellation.
fn ln_factorial_over_power(n: u64) -> f64 {
    let nf = n as f64;
    -nf + 0.5 * (2.0 * PI * nf).ln() + stirling_error(n)
}

/// The deviance term x ln(x / m) + m - x, accurate when x is close to m (Loader 2000).
fn deviance_term(x: f64, m: f64) -> f64 {
    if (x - m).abs() < 0.1 * (x + m) {
        let v = (x - m) / (x + m);
        let mut s = (x - m) * v;
        let mut ej = 2.0 * x * v;
        let v2 = v * v;
        for j in 1..1000 {
            ej *= v2;
            let next = s + ej / (2 * j + 1) as f64;
            if next == s {
                break;
            }
            s = next;
        }
        s
    } else {
        x * (x / m).ln() + m - x
    }
}

/// ln of the binomial probability of j successes in n trials with success probability np / n,
/// given np and nq = n - np separately (so nq keeps its accuracy when p is near 1); 0 < j < n.
fn ln_binomial_pmf(j: u64, n: u64, np: f64, nq: f64) -> f64 {
    let (jf, nf) = (j as f64, n as f64);
    let lc = stirling_error(n)
        - stirling_error(j)
        - stirling_error(n - j)
        - deviance_term(jf, np)
        - deviance_term(nf - jf, nq);
    let lf = (2.0 * PI).ln() + jf.ln() + (-jf / nf).ln_1p();
    lc - 0.5 * lf
}

/// P(D_n^+ >= x) for 0 < x < 1 by the positive sum of Smirnov (1944) and Birnbaum & Tingey
/// (1951), in log space (module docs). Terms are unimodal in j; the loop stops once they fall
/// below e^-60 of the largest past its peak.
pub(crate) fn smirnov_sf(n: u64, x: f64) -> f64 {
    if !(x > 0.0) {
        return 1.0;
    }
    if x >= 1.0 {
        return 0.0;
    }
    let nf = n as f64;
    let t = nf * x;
    let last = (nf - t).floor().max(0.0) as u64;
    let (mut top, mut sum) = (f64::NEG_INFINITY, 0.0f64); // sum of exp(l - top)
    let mut past_peak = false;
    for j in 0..=last.min(n) {
        let jf = j as f64;
        let np = t + jf;
        let nq = (nf - jf) - t;
        let l = if j == 0 {
            // x (x)^(-1) (1 - x)^n
            nf * (-x).ln_1p()
        } else if nq <= 0.0 {
            continue; // (1 - x - j/n)^(n - j) = 0 with n - j > 0
        } else {
            t.ln() - np.ln() + ln_binomial_pmf(j, n, np, nq)
        };
        if l > top {
            sum = sum * (top - l).exp() + 1.0;
            top = l;
        } else {
            sum += (l - top).exp();
            if l < top - 1.0 {
                past_peak = true;
            }
            if past_peak && l < top - 60.0 {
                break;
            }
        }
    }
    (top + sum.ln()).exp()
}

/// P(D_n < x) by the matrix of Durbin (1973), evaluated as in Marsaglia, Tsang & Wang (2003,
/// "Evaluating Kolmogorov's distribution", J. Statistical Software 8(18)): with k = ceil(n x),
/// h = k - n x and the (2k - 1)-square matrix H below, P(D_n < x) = n!/n^n (H^n)_{k,k}.
fn durbin_cdf(n: u64, x: f64) -> f64 {
    let t = n as f64 * x;
    let k = (t.floor() as usize) + 1;
    let m = 2 * k - 1;
    let h = k as f64 - t;
    // H_{ij} = 1/(i - j + 1)! for i - j + 1 >= 0 (0 elsewhere), with the first column and the
    // last row reduced by powers of h, and (2h - 1)^m added back in the corner when 2h > 1.
    let mut hm = vec![0.0f64; m * m];
    for i in 0..m {
        for j in 0..m {
            if i + 1 >= j {
                hm[i * m + j] = 1.0;
            }
        }
    }
    for i in 0..m {
        hm[i * m] -= h.powi(i as i32 + 1);
        hm[(m - 1) * m + i] -= h.powi((m - i) as i32);
    }
    if 2.0 * h - 1.0 > 0.0 {
        hm[(m - 1) * m] += (2.0 * h - 1.0).powi(m as i32);
    }
    for i in 0..m {
        for j in 0..m {
            if i + 1 > j {
                let d = i + 1 - j;
                let fact: f64 = (1..=d).map(|v| v as f64).product();
                hm[i * m + j] /= fact;
            }
        }
    }
    let (power, exp2) = matrix_power_scaled(&hm, m, n);
    let entry = power[(k - 1) * m + (k - 1)];
    if !(entry > 0.0) {
        return 0.0;
    }
    let log_cdf = entry.ln() + exp2 as f64 * std::f64::consts::LN_2 + ln_factorial_over_power(n);
    log_cdf.exp().min(1.0)
}

/// A^p for a square row-major matrix, returned as (B, e) with A^p = B 2^e; B is rescaled by a
/// power of two after every product so no entry overflows.
fn matrix_power_scaled(a: &[f64], m: usize, p: u64) -> (Vec<f64>, i64) {
    let mul = |x: &[f64], y: &[f64]| -> Vec<f64> {
        let mut out = vec![0.0; m * m];
        for i in 0..m {
            for l in 0..m {
                let xil = x[i * m + l];
                if xil == 0.0 {
                    continue;
                }
                let row = &y[l * m..(l + 1) * m];
                let o = &mut out[i * m..(i + 1) * m];
                for (oj, yj) in o.iter_mut().zip(row) {
                    *oj += xil * yj;
                }
            }
        }
        out
    };
    let rescale = |v: &mut Vec<f64>, e: &mut i64| {
        let big = v.iter().fold(0.0f64, |acc, x| acc.max(x.abs()));
        if big > 0.0 && big.is_finite() {
            let shift = big.log2().floor() as i64;
            if shift.abs() > 64 {
                let f = (-(shift as f64)).exp2();
                v.iter_mut().for_each(|x| *x *= f);
                *e += shift;
            }
        }
    };
    let mut result: Option<(Vec<f64>, i64)> = None;
    let (mut base, mut base_e) = (a.to_vec(), 0i64);
    let mut q = p;
    loop {
        if q & 1 == 1 {
            result = Some(match result {
                None => (base.clone(), base_e),
                Some((r, re)) => {
                    let mut v = mul(&r, &base);
                    let mut e = re + base_e;
                    rescale(&mut v, &mut e);
                    (v, e)
                }
            });
        }
        q >>= 1;
        if q == 0 {
            break;
        }
        let mut sq = mul(&base, &base);
        let mut e = 2 * base_e;
        rescale(&mut sq, &mut e);
        base = sq;
        base_e = e;
    }
    result.unwrap_or_else(|| {
        let mut id = vec![0.0; m * m];
        (0..m).for_each(|i| id[i * m + i] = 1.0);
        (id, 0)
    })
}

/// P(D_n < x) by the recursion of Pomeranz (1974), written in scaled time s = n u.
///
/// D_n < x with t = n x says that the count N(s) of points in [0, s] satisfies
/// s - t < N(s) < s + t everywhere. The integer bounds change only where s + t or s - t crosses
/// an integer; with a = min(frac t, 1 - frac t) these points are A = 0, a, 1 - a, 1 + a, 2 - a,
/// ..., n - a, n. Between consecutive points A_{i-1} < A_i the count grows by c with weight
/// (A_i - A_{i-1})^c / c! (uniform spacings), and at A_i it must lie in
/// [floor(A_i - t) + 1, ceil(A_i + t) - 1]. After the last point, P(D_n < x) = n!/n^n V(n).
fn pomeranz_cdf(n: u64, x: f64) -> f64 {
    let nu = n as usize;
    let t = n as f64 * x;
    let f = t - t.floor();
    let a = f.min(1.0 - f);
    let mut points = Vec::with_capacity(2 * nu + 2);
    points.push(0.0);
    for k in 0..nu {
        points.push(k as f64 + a);
        points.push(k as f64 + 1.0 - a);
    }
    points.push(n as f64);
    // v[c] = weight of count c (0..=n); log_scale carries the rescaling.
    let mut v = vec![0.0f64; nu + 1];
    v[0] = 1.0;
    let mut log_scale = 0.0f64;
    // inv_fact[c] = 1/c!
    let mut inv_fact = vec![1.0f64; nu + 1];
    for c in 1..=nu {
        inv_fact[c] = inv_fact[c - 1] / c as f64;
    }
    let mut next = vec![0.0f64; nu + 1];
    // Counts below the previous point's lower bound have weight 0: start the sums there.
    let mut prev_lo = 0usize;
    for w in points.windows(2) {
        let (prev, cur) = (w[0], w[1]);
        let delta = cur - prev;
        // Allowed counts at `cur`. The grid points sit where cur -/+ t is an integer, which
        // rounding may miss by an ulp: snap values within 1e-9 of an integer first.
        let snap = |v: f64| {
            if (v - v.round()).abs() < 1e-9 {
                v.round()
            } else {
                v
            }
        };
        let lo = (snap(cur - t).floor() + 1.0).max(0.0) as usize;
        let hi_f = snap(cur + t).ceil() - 1.0;
        if hi_f < 0.0 {
            return 0.0;
        }
        let hi = (hi_f as usize).min(nu);
        let mut pows = vec![1.0f64; nu + 1];
        for c in 1..=nu {
            pows[c] = pows[c - 1] * delta;
        }
        next.iter_mut().for_each(|x| *x = 0.0);
        for c in lo..=hi.max(lo) {
            if c > hi {
                break;
            }
            let mut s = 0.0;
            for (from, &vf) in v.iter().enumerate().take(c + 1).skip(prev_lo) {
                s += vf * pows[c - from] * inv_fact[c - from];
            }
            next[c] = s;
        }
        prev_lo = lo;
        std::mem::swap(&mut v, &mut next);
        let big = v.iter().fold(0.0f64, |acc, x| acc.max(x.abs()));
        if !(big > 0.0) {
            return 0.0;
        }
        if !(1e-100..=1e100).contains(&big) {
            v.iter_mut().for_each(|x| *x /= big);
            log_scale += big.ln();
        }
    }
    let last = v[nu];
    if !(last > 0.0) {
        return 0.0;
    }
    (last.ln() + log_scale + ln_factorial_over_power(n))
        .exp()
        .min(1.0)
}

/// P(D_n < x) by the Pelz & Good (1976) series K0(z) + K1(z)/sqrt(n) + K2(z)/n + K3(z)/n^(3/2),
/// z = x sqrt(n), as given by Simard & L'Ecuyer (2011, section 2.4). K0 is Kolmogorov's limit.
fn pelz_good_cdf(n: u64, x: f64) -> f64 {
    let nf = n as f64;
    let z = x * nf.sqrt();
    let (z2, pi2) = (z * z, PI * PI);
    let (z4, z6, z8) = (z2 * z2, z2 * z2 * z2, z2 * z2 * z2 * z2);
    let w = (PI / 2.0).sqrt();
    // Sums over half-integers h = k + 1/2 and integers k >= 1 of the weight exp(-pi^2 v^2 / (2 z^2)).
    let (mut s0, mut s1, mut s2, mut s3) = (0.0, 0.0, 0.0, 0.0);
    for k in 0..1000 {
        let h = k as f64 + 0.5;
        let h2 = h * h;
        let e = (-pi2 * h2 / (2.0 * z2)).exp();
        if e == 0.0 {
            break;
        }
        s0 += e;
        s1 += (pi2 * h2 - z2) * e;
        s2 += (6.0 * z6
            + 2.0 * z4
            + pi2 * (2.0 * z4 - 5.0 * z2) * h2
            + pi2 * pi2 * (1.0 - 2.0 * z2) * h2 * h2)
            * e;
        s3 += (pi2 * pi2 * pi2 * h2 * h2 * h2 * (5.0 - 30.0 * z2)
            + pi2 * pi2 * h2 * h2 * (-60.0 * z2 + 212.0 * z4)
            + pi2 * h2 * (135.0 * z4 - 96.0 * z6)
            - (30.0 * z6 + 90.0 * z8))
            * e;
        if e < 1e-18 * s0 {
            break;
        }
    }
    let (mut r2, mut r3) = (0.0, 0.0);
    for k in 1..1000 {
        let kf = k as f64;
        let k2 = kf * kf;
        let e = (-pi2 * k2 / (2.0 * z2)).exp();
        if e == 0.0 {
            break;
        }
        r2 += pi2 * k2 * e;
        r3 += (3.0 * pi2 * k2 * z2 - pi2 * pi2 * k2 * k2) * e;
        if e < 1e-18 * (r2.abs() + 1e-300) {
            break;
        }
    }
    let k0 = (2.0 * PI).sqrt() / z * s0;
    let k1 = w / (3.0 * z4) * s1;
    let k2 = w / z * (s2 / (36.0 * z6) - r2 / (18.0 * z2));
    let k3 = w / z * (s3 / (3240.0 * z8 * z) + r3 / (108.0 * z4 * z));
    let sq = nf.sqrt();
    (k0 + k1 / sq + k2 / nf + k3 / (nf * sq)).clamp(0.0, 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn n_equals_one_is_uniform() {
        // D_1 = max(U, 1 - U): P(D_1 >= x) = 2 (1 - x) for 1/2 <= x <= 1 (worked by hand).
        for x in [0.5, 0.6, 0.9, 0.99] {
            assert!((kolmogorov_sf(1, x) - 2.0 * (1.0 - x)).abs() < 1e-14);
        }
        assert_eq!(kolmogorov_sf(1, 0.4), 1.0);
    }

    #[test]
    fn n_equals_two_by_hand() {
        // n = 2, 1/4 < x <= 1/2: P(D_2 < x) = 2! (2x - 1/2)^2 (Ruben & Gambino 1982, for
        // 1/(2n) <= x <= 1/n); at x = 0.4 that is 2 * 0.09 = 0.18.
        assert!((kolmogorov_sf(2, 0.4) - 0.82).abs() < 1e-14);
    }

    #[test]
    fn durbin_and_pomeranz_agree() {
        // Two exact methods derived differently (Durbin's matrix; Pomeranz's recursion) must give
        // the same cdf wherever both apply.
        for &n in &[3u64, 10, 37, 100, 140, 400] {
            for &z in &[0.6, 0.8, 1.0, 1.3, 1.7] {
                let x = z / (n as f64).sqrt();
                if n as f64 * x <= 1.0 || x >= 0.5 {
                    continue;
                }
                let (d, p) = (durbin_cdf(n, x), pomeranz_cdf(n, x));
                assert!(
                    (d - p).abs() < 1e-12 * d.max(1e-300),
                    "n={n} x={x}: {d} vs {p}"
                );
            }
        }
    }

    #[test]
    fn smirnov_positive_sum_matches_exact_small_n() {
        // n = 1: P(D_1^+ >= x) = P(U <= 1 - x) = 1 - x (worked by hand).
        assert!((smirnov_sf(1, 0.3) - 0.7).abs() < 1e-14);
        // n = 2, x >= 1/2: only j = 0 contributes: (1 - x)^2 (worked by hand from the sum).
        assert!((smirnov_sf(2, 0.6) - 0.16).abs() < 1e-14);
    }

    #[test]
    fn pelz_good_close_to_exact_at_large_n() {
        // The series has error O(n^-2) (Pelz & Good 1976): at n = 2,000 it must agree with the
        // exact Durbin matrix value to about 1e-7.
        let n = 2_000u64;
        for &z in &[0.7, 1.0, 1.2] {
            let x = z / (n as f64).sqrt();
            let (d, p) = (durbin_cdf(n, x), pelz_good_cdf(n, x));
            assert!((d - p).abs() < 1e-7, "z={z}: {d} vs {p}");
        }
    }

    #[test]
    fn limit_is_kolmogorov() {
        // As n grows, P(D_n >= z / sqrt(n)) tends to Kolmogorov's 2 sum (-1)^(k-1) exp(-2 k^2 z^2)
        // (Kolmogorov 1933); at n = 10^7 the gap is below 1e-3 relative.
        let z: f64 = 1.36;
        let limit: f64 = 2.0
            * (1..50)
                .map(|k| {
                    let s = if k % 2 == 1 { 1.0 } else { -1.0 };
                    s * (-2.0 * (k * k) as f64 * z * z).exp()
                })
                .sum::<f64>();
        let n = 10_000_000u64;
        let p = kolmogorov_sf(n, z / (n as f64).sqrt());
        assert!((p / limit - 1.0).abs() < 1e-3, "{p} vs {limit}");
    }
}

use super::*;
use rand_distr::{Distribution, StandardNormal};

fn gaussian(n: usize, d: usize, shift: f64, seed: u64) -> Vec<f64> {
    let mut r = rng(seed);
    (0..n * d)
        .map(|_| StandardNormal.sample(&mut r))
        .map(|v: f64| v + shift)
        .collect()
}

#[test]
fn permutation_statistic_matches_direct_double_sum() {
    // The indicator-product form must equal the definition (Gretton et al. 2012, eq. 3)
    // evaluated pair by pair.
    let s = gaussian(7, 2, 0.0, 3);
    let t = gaussian(5, 2, 0.5, 4);
    let (sv, tv) = (
        MatrixView::new(&s, 7, 2).unwrap(),
        MatrixView::new(&t, 5, 2).unwrap(),
    );
    let r = MmdShiftTest::new()
        .sigma(Some(0.8))
        .permutations(9)
        .run(sv, tv)
        .unwrap();
    let (z, _) = pooled_standardized(sv, tv);
    let k = |a: usize, b: usize| {
        let sq: f64 = z
            .row(a)
            .iter()
            .zip(z.row(b))
            .map(|(u, v)| (u - v) * (u - v))
            .sum();
        (-sq / (2.0 * 0.64)).exp()
    };
    let (mut xx, mut yy, mut xy) = (0.0, 0.0, 0.0);
    for i in 0..12 {
        for j in 0..12 {
            match (i < 7, j < 7) {
                (true, true) if i != j => xx += k(i, j),
                (false, false) if i != j => yy += k(i, j),
                (true, false) => xy += k(i, j),
                _ => {}
            }
        }
    }
    let direct = xx / 42.0 + yy / 20.0 - 2.0 * xy / 35.0;
    assert!(
        (r.statistic - direct).abs() < 1e-12,
        "{} vs {direct}",
        r.statistic
    );
}

#[test]
fn zeroed_buffer_reads_zero_and_keeps_writes() {
    for len in [0usize, 1, 1000, 3 << 20] {
        let mut buf = ZeroedBuffer::new(len);
        assert_eq!(buf.as_slice().len(), len);
        assert!(buf.as_slice().iter().all(|v| *v == 0.0));
        for (i, v) in buf.as_mut_slice().iter_mut().enumerate().step_by(997) {
            *v = i as f32;
        }
        for (i, v) in buf.as_slice().iter().enumerate() {
            assert_eq!(*v, if i % 997 == 0 { i as f32 } else { 0.0 });
        }
    }
}

/// Float64 reference for the relabelled statistics: the full kernel matrix in f64 and, for the
/// same seeded shuffles, MMD^2_u from its definition (Gretton et al. 2012, eq. 3) as sums over
/// the selected pairs.
fn reference_f64(z: MatrixView, ns: usize, sigma: f64, seeds: &[u64]) -> Vec<f64> {
    let n = z.rows();
    let k = kernel::kernel_block(z, z, sigma);
    let (mf, nf) = (ns as f64, (n - ns) as f64);
    seeds
        .iter()
        .map(|&s| {
            let mut idx: Vec<usize> = (0..n).collect();
            idx.shuffle(&mut rng(s));
            let mut src = vec![false; n];
            for &i in &idx[..ns] {
                src[i] = true;
            }
            let (mut xx, mut yy, mut xy) = (0.0, 0.0, 0.0);
            for i in 0..n {
                for j in 0..n {
                    let v = k[i * n + j];
                    match (src[i], src[j]) {
                        (true, true) if i != j => xx += v,
                        (false, false) if i != j => yy += v,
                        (true, false) => xy += v,
                        _ => {}
                    }
                }
            }
            xx / (mf * (mf - 1.0)) + yy / (nf * (nf - 1.0)) - 2.0 * xy / (mf * nf)
        })
        .collect()
}

/// Rows sorted on their first feature (row-major, `d` columns).
fn sorted_rows(v: &[f64], d: usize) -> Vec<f64> {
    let mut rows: Vec<&[f64]> = v.chunks(d).collect();
    rows.sort_by(|a, b| a[0].total_cmp(&b[0]));
    rows.concat()
}

#[test]
fn f32_permutation_statistics_match_f64_reference() {
    // No shift: the observed statistic sits inside the permutation distribution, where
    // rounding could move a relabelled statistic across it. Random and sorted row orders.
    for sorted in [false, true] {
        f32_against_f64(sorted);
    }
}

fn f32_against_f64(sorted: bool) {
    let (ns, nt, d, b) = (900, 1100, 3, 200);
    let mut s = gaussian(ns, d, 0.0, 11);
    let mut t = gaussian(nt, d, 0.0, 12);
    if sorted {
        s = sorted_rows(&s, d);
        t = sorted_rows(&t, d);
    }
    let (sv, tv) = (
        MatrixView::new(&s, ns, d).unwrap(),
        MatrixView::new(&t, nt, d).unwrap(),
    );
    let test = MmdShiftTest::new().permutations(b).seed(5);
    let res = test.run(sv, tv).unwrap();
    let (z, _) = pooled_standardized(sv, tv);
    let sigma = kernel::median_distance(&[z.view()], 5 ^ TAG_MEDIAN);
    let mut gen = rng(5 ^ TAG_PERM);
    let seeds: Vec<u64> = (0..b).map(|_| gen.next_u64()).collect();
    let (observed, ours, err) = permutation_statistics(
        &centred_kernel(z.view(), sigma, ns, 5 ^ TAG_ORDER),
        ns,
        &seeds,
    );
    let reference = reference_f64(z.view(), ns, sigma, &seeds);
    let mean = reference.iter().sum::<f64>() / b as f64;
    let sd = (reference.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (b - 1) as f64).sqrt();
    let worst = ours
        .iter()
        .zip(&reference)
        .map(|(a, r)| (a - r).abs())
        .fold(0.0, f64::max);
    // Tolerance: the module docs' error model predicts about 1e-6 of the spread at this size;
    // at 1e-4 of it a p-value from 1,000 permutations would change with a probability near
    // 0.1 (B x 2 x error x density 0.5 / sd), so above it "cannot change a p-value in
    // practice" would be false.
    assert!(
        worst <= 1e-4 * sd,
        "largest f32 error {worst:e} against a permutation sd of {sd:e}"
    );
    assert_eq!(observed, res.statistic);
    assert_eq!(res.p_value, permutation_p_value(observed, &reference, err));
    // The modelled error (module docs) is of the order of the measured one.
    assert!(worst <= TIE_ERRORS * err, "error {worst:e}, model {err:e}");
    // The case the check is about: a p-value inside (0, 1), i.e. relabelled statistics on both
    // sides of the observed one.
    assert!(
        res.p_value > 0.05 && res.p_value < 0.95,
        "p = {}",
        res.p_value
    );
}

#[test]
fn both_permutation_routes_agree_with_the_f64_reference() {
    // The masked route (AVX-512 masked sums over the selected rows) and the product route
    // (faer's triangular matmul) against the f64 sums of Gretton et al. (2012), eq. 3, at
    // sizes that exercise partial 16-value pieces, padded groups of relabellings, one and
    // several batches, and unequal samples.
    for (ns, nt, d, b, seed) in [
        (3, 2, 1, 5, 1u64),
        (17, 20, 2, 40, 2),
        (250, 161, 3, 300, 3),
        (700, 500, 4, 70, 4),
    ] {
        let s = gaussian(ns, d, 0.0, seed);
        let t = gaussian(nt, d, 0.1, seed + 100);
        let (sv, tv) = (
            MatrixView::new(&s, ns, d).unwrap(),
            MatrixView::new(&t, nt, d).unwrap(),
        );
        let (z, _) = pooled_standardized(sv, tv);
        let sigma = kernel::median_distance(&[z.view()], seed);
        let kc = centred_kernel(z.view(), sigma, ns, seed ^ TAG_ORDER);
        let seeds: Vec<u64> = (0..b as u64).map(|k| k * 7919 + seed).collect();
        let reference = reference_f64(z.view(), ns, sigma, &seeds);
        let mean = reference.iter().sum::<f64>() / b as f64;
        let sd =
            (reference.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (b - 1) as f64).sqrt();
        for route in [PermRoute::Product, PermRoute::Masked] {
            let (_, ours, err) = permutation_statistics_by(&kc, ns, &seeds, route);
            assert_eq!(ours.len(), b);
            let worst = ours
                .iter()
                .zip(&reference)
                .map(|(a, r)| (a - r).abs())
                .fold(0.0, f64::max);
            // As in f32_against_f64: the modelled error, and 1e-4 of the permutation spread.
            assert!(
                worst <= TIE_ERRORS * err && worst <= 1e-4 * sd,
                "{route:?} at {ns}+{nt}: error {worst:e}, model {err:e}, sd {sd:e}"
            );
        }
    }
}

#[test]
fn relabelled_statistics_do_not_depend_on_the_thread_count() {
    // Each relabelling's sums run over its rows in a fixed order whatever the batch or
    // thread, so 1, 2 and 3 threads give the same bits (both routes).
    let (ns, nt, d, b) = (300, 260, 3, 150);
    let s = gaussian(ns, d, 0.0, 21);
    let t = gaussian(nt, d, 0.2, 22);
    let (sv, tv) = (
        MatrixView::new(&s, ns, d).unwrap(),
        MatrixView::new(&t, nt, d).unwrap(),
    );
    let (z, _) = pooled_standardized(sv, tv);
    let kc = centred_kernel(z.view(), 1.3, ns, 7);
    let seeds: Vec<u64> = (0..b as u64).map(|k| 31 * k + 5).collect();
    for route in [PermRoute::Product, PermRoute::Masked] {
        let runs: Vec<Vec<u64>> = [1, 2, 3]
            .iter()
            .map(|&threads| {
                let pool = rayon::ThreadPoolBuilder::new()
                    .num_threads(threads)
                    .build()
                    .unwrap();
                let (_, stats, _) =
                    pool.install(|| permutation_statistics_by(&kc, ns, &seeds, route));
                stats.iter().map(|v| v.to_bits()).collect()
            })
            .collect();
        assert_eq!(runs[0], runs[1], "{route:?}");
        assert_eq!(runs[0], runs[2], "{route:?}");
    }
}

#[test]
fn exact_ties_count_as_ties() {
    // One binary feature: a relabelling's statistic depends only on how many 1s the rows
    // called "source" hold, so relabellings with the observed count tie with the observed
    // statistic exactly. The p-value must count them (its definition, module docs); the
    // others are compared with the f64 reference (sums from Gretton et al. 2012, eq. 3).
    let (ns, nt, b) = (600, 640, 200);
    let bit = |i: usize, seed: usize| f64::from(u8::from((i * 7 + seed) % 5 < 2));
    let s: Vec<f64> = (0..ns).map(|i| bit(i, 0)).collect();
    let t: Vec<f64> = (0..nt).map(|i| bit(i, 1)).collect();
    let (sv, tv) = (
        MatrixView::new(&s, ns, 1).unwrap(),
        MatrixView::new(&t, nt, 1).unwrap(),
    );
    let res = MmdShiftTest::new()
        .sigma(Some(1.0))
        .permutations(b)
        .seed(2)
        .run(sv, tv)
        .unwrap();
    let pooled: Vec<f64> = s.iter().chain(&t).copied().collect();
    let ones = |rows: &[usize]| rows.iter().filter(|&&i| pooled[i] == 1.0).count();
    let observed_ones = ones(&(0..ns).collect::<Vec<_>>());
    let (z, _) = pooled_standardized(sv, tv);
    let mut gen = rng(2 ^ TAG_PERM);
    let seeds: Vec<u64> = (0..b).map(|_| gen.next_u64()).collect();
    let reference = reference_f64(z.view(), ns, 1.0, &seeds);
    let (mut ties, mut above) = (0, 0);
    for (&seed, v) in seeds.iter().zip(&reference) {
        let mut idx: Vec<usize> = (0..ns + nt).collect();
        idx.shuffle(&mut rng(seed));
        if ones(&idx[..ns]) == observed_ones {
            ties += 1;
        } else if *v > res.statistic {
            above += 1;
        }
    }
    assert!(ties > 0, "the case must have exact ties");
    assert_eq!(res.p_value, (1 + ties + above) as f64 / (1 + b) as f64);
}

#[test]
fn block_route_detects_shift() {
    let s = gaussian(600, 2, 0.0, 5);
    let t = gaussian(600, 2, 0.5, 6);
    let (sv, tv) = (
        MatrixView::new(&s, 600, 2).unwrap(),
        MatrixView::new(&t, 600, 2).unwrap(),
    );
    let r = MmdShiftTest::new()
        .max_kernel_rows(100)
        .run(sv, tv)
        .unwrap();
    assert_eq!(r.p_value_method, PValueMethod::BlockPermutation);
    // A 0.5-sd shift in both features at 600 rows a side: no relabelling reaches the observed
    // mean, so p is the smallest attainable value 1 / (1 + 200).
    assert_eq!(r.p_value, 1.0 / 201.0);
}

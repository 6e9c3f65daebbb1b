"""Shared test cases with known importance weights (analytic Gaussian pairs and a selection-bias
set-up on scikit-learn's bundled breast-cancer data), and the NMSE used to score estimates."""

import numpy as np
from scipy import stats
from scipy.stats import norm


def nmse(w_hat, w_true):
    """mean((w_hat - w)^2) / mean(w^2) after rescaling both to mean 1 on the evaluation rows."""
    a = np.asarray(w_hat, float) / np.mean(w_hat)
    b = np.asarray(w_true, float) / np.mean(w_true)
    return float(np.mean((a - b) ** 2) / np.mean(b**2))


def gaussian_1d(n, seed):
    """Source N(1, 0.5^2), target N(2, 0.25^2): a toy from the covariate-shift literature (from
    memory). Returns source, target, held-out source rows and their true ratio (scipy.stats.norm)."""
    rng = np.random.default_rng(seed)
    s = rng.normal(1.0, 0.5, (n, 1))
    t = rng.normal(2.0, 0.25, (n, 1))
    e = rng.normal(1.0, 0.5, (2000, 1))
    # reference: scipy.stats.norm.pdf, the analytic ratio of two normal densities
    truth = stats.norm.pdf(e[:, 0], 2.0, 0.25) / stats.norm.pdf(e[:, 0], 1.0, 0.5)
    return s, t, e, truth


def gaussian_mean_shift(n, seed, d=5, shift=0.5):
    """Source N(0, I_d), target N(mu, I_d) with mu = (shift, shift/2, 0, ...)."""
    rng = np.random.default_rng(seed)
    mu = np.zeros(d)
    mu[0], mu[1] = shift, shift / 2
    s = rng.normal(0.0, 1.0, (n, d))
    t = rng.normal(0.0, 1.0, (n, d)) + mu
    e = rng.normal(0.0, 1.0, (2000, d))
    # reference: scipy.stats.multivariate_normal.logpdf (analytic Gaussian ratio)
    logw = stats.multivariate_normal.logpdf(e, mu, np.eye(d)) - stats.multivariate_normal.logpdf(
        e, np.zeros(d), np.eye(d)
    )
    return s, t, e, np.exp(logw)


def breast_cancer_selection(seed):
    """Zadrozny (2004) selection bias on scikit-learn's bundled breast-cancer data (Wolberg, Street,
    Mangasarian 1995): the rows are split at random in two halves; the target is the first half;
    the source keeps each row of the second half with the known probability
    s(x) = 0.1 + 0.8 * sigmoid(1.5 z_radius - 1.0 z_texture) (z: standardised columns). Then
    p_source(x) is proportional to s(x) p(x) and the true ratio to 1 / s(x).
    Returns source, target and 1 / s(x) at the source rows."""
    from sklearn.datasets import load_breast_cancer

    X = load_breast_cancer().data
    rng = np.random.default_rng(seed)
    z = (X - X.mean(0)) / X.std(0)
    s_prob = 0.1 + 0.8 / (1.0 + np.exp(-(1.5 * z[:, 0] - 1.0 * z[:, 1])))
    order = rng.permutation(len(X))
    half = len(X) // 2
    tgt_idx, pool = order[:half], order[half:]
    keep = pool[rng.random(len(pool)) < s_prob[pool]]
    return X[keep], X[tgt_idx], 1.0 / s_prob[keep]


def sinc_regression_toy(seed, n_source=150, n_target=5000, noise=0.1):
    """A misspecified regression under covariate shift: x ~ N(1, 0.5^2) in the source and
    N(2, 0.25^2) in the target (a toy from the covariate-shift literature, from memory),
    y = sinc(x) + noise. Returns xs, ys, true source weights, xt, yt, true target weights."""
    rng = np.random.default_rng(seed)
    xs = rng.normal(1.0, 0.5, n_source)
    xt = rng.normal(2.0, 0.25, n_target)
    ys = np.sinc(xs) + noise * rng.normal(size=n_source)
    yt = np.sinc(xt) + noise * rng.normal(size=n_target)
    # reference: scipy.stats.norm.pdf gives the exact density ratio of the two normals
    ws = norm.pdf(xs, 2.0, 0.25) / norm.pdf(xs, 1.0, 0.5)
    wt = norm.pdf(xt, 2.0, 0.25) / norm.pdf(xt, 1.0, 0.5)
    return xs.reshape(-1, 1), ys, ws, xt.reshape(-1, 1), yt, wt


def labelled_selection(dataset, seed, columns=(0, 1)):
    """Zadrozny (2004) selection bias, as in breast_cancer_selection, on a labelled bundled
    scikit-learn dataset ("breast_cancer": Wolberg, Street, Mangasarian 1995, classification;
    "diabetes": Efron et al. 2004, regression): the target is a random half of the rows; the
    source keeps each row of the other half with probability
    s(x) = 0.1 + 0.8 * sigmoid(1.5 z_a - 1.0 z_b), z standardised columns `columns` = (a, b).
    Returns source rows, source labels, target rows, target labels and 1 / s(x) at the source rows."""
    from sklearn.datasets import load_breast_cancer, load_diabetes

    data = {"breast_cancer": load_breast_cancer, "diabetes": load_diabetes}[dataset]()
    X, y = np.asarray(data.data, float), np.asarray(data.target, float)
    rng = np.random.default_rng(seed)
    z = (X - X.mean(0)) / X.std(0)
    a, b = columns
    s_prob = 0.1 + 0.8 / (1.0 + np.exp(-(1.5 * z[:, a] - 1.0 * z[:, b])))
    order = rng.permutation(len(X))
    half = len(X) // 2
    tgt_idx, pool = order[:half], order[half:]
    keep = pool[rng.random(len(pool)) < s_prob[pool]]
    return X[keep], y[keep], X[tgt_idx], y[tgt_idx], 1.0 / s_prob[keep]

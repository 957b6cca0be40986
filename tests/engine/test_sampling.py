"""Member designs: grids, random samples and Latin hypercubes are reproducible by index."""
import numpy as np
import pytest
from scipy import stats

from sweeps import sampling


def sample_design(method="random", count=1000, seed=42, dists=None):
    dists = dists or [{"distribution": "uniform", "low": 1.0, "high": 3.0},
                      {"distribution": "log_uniform", "low": 1e-3, "high": 1e3}]
    return {"kind": "sample", "method": method, "count": count, "seed": seed,
            "columns": [("parameters", f"p{j}") for j in range(len(dists))],
            "distributions": dists}


def test_grid_axes_linear_and_log():
    assert np.allclose(sampling.axis_values({"from": 0, "to": 1, "count": 5}), [0, .25, .5, .75, 1])
    assert np.allclose(sampling.axis_values({"from": 1e-2, "to": 1e2, "count": 5, "spacing": "log"}),
                       [1e-2, 1e-1, 1, 10, 100])
    assert np.array_equal(sampling.axis_values([3.0, 1.0]), [3.0, 1.0])


def test_grid_members_are_the_cartesian_product_in_c_order():
    design = {"kind": "grid", "columns": [("parameters", "a"), ("initial", "x")],
              "axes": [[1.0, 2.0, 3.0], [10.0, 20.0]]}
    assert sampling.design_size(design) == 6
    rows = sampling.member_values(design, 0, 6)
    assert rows.tolist() == [[1, 10], [1, 20], [2, 10], [2, 20], [3, 10], [3, 20]]
    # any range rebuilds the same members
    assert np.array_equal(sampling.member_values(design, 3, 5), rows[3:5])


def test_the_same_seed_reproduces_exactly_and_another_seed_differs():
    for method in sampling.METHODS:
        a = sampling.member_values(sample_design(method), 0, 1000)
        b = sampling.member_values(sample_design(method), 0, 1000)
        c = sampling.member_values(sample_design(method, seed=43), 0, 1000)
        assert np.array_equal(a, b)
        assert not np.allclose(a, c)
        assert np.array_equal(sampling.member_values(sample_design(method), 250, 300), a[250:300])


def test_latin_hypercube_hits_every_stratum_of_every_variable_once():
    # The defining property of a Latin hypercube sample: each of the n equal-probability strata
    # of every variable holds exactly one point (McKay, Beckman & Conover 1979, Technometrics 21(2)).
    n = 500
    u = sampling.unit_samples("latin_hypercube", n, 4, seed=7)
    for j in range(4):
        strata = np.floor(u[:, j] * n).astype(int)
        assert sorted(strata.tolist()) == list(range(n))


def test_latin_hypercube_strata_after_the_log_uniform_transform():
    n = 200
    values = sampling.member_values(sample_design("latin_hypercube", count=n), 0, n)[:, 1]
    strata = np.floor((np.log(values) - np.log(1e-3)) / (np.log(1e3) - np.log(1e-3)) * n)
    assert sorted(strata.astype(int).tolist()) == list(range(n))


@pytest.mark.parametrize("dist, cdf", [
    ({"distribution": "uniform", "low": -1.0, "high": 2.0}, stats.uniform(-1, 3).cdf),
    ({"distribution": "log_uniform", "low": 1e-2, "high": 1e2}, stats.loguniform(1e-2, 1e2).cdf),
    ({"distribution": "normal", "mean": 5.0, "std": 2.0}, stats.norm(5, 2).cdf),
    ({"distribution": "truncated_normal", "mean": 0.0, "std": 1.0, "low": -0.5, "high": 2.0},
     stats.truncnorm(-0.5, 2.0).cdf),
])
def test_random_draws_follow_their_distribution(dist, cdf):
    # Kolmogorov-Smirnov against SciPy's distribution (independent oracle); fixed seed.
    values = sampling.member_values(sample_design(count=4000, dists=[dist]), 0, 4000)[:, 0]
    assert stats.kstest(values, cdf).pvalue > 1e-3


def test_truncated_normal_stays_inside_its_bounds_far_in_the_tail():
    dist = {"distribution": "truncated_normal", "mean": 0.0, "std": 1.0, "low": 6.0, "high": 7.0}
    values = sampling.member_values(sample_design(count=1000, dists=[dist]), 0, 1000)[:, 0]
    assert np.all((values >= 6.0) & (values <= 7.0)) and np.all(np.isfinite(values))


def test_list_rows_keep_base_values_where_nan():
    design = {"kind": "list", "columns": [("parameters", "k"), ("initial", "x")],
              "rows": [[2.0, float("nan")], [float("nan"), 5.0]]}
    values = sampling.member_values(design, 0, 2)
    P, Y = sampling.apply_values(values, design["columns"], np.array([1.0, 9.0]), np.array([3.0]),
                                 ("k", "other"), ("x",))
    assert P.tolist() == [[2.0, 9.0], [1.0, 9.0]]
    assert Y.tolist() == [[3.0], [5.0]]

"""engine.predict against statsmodels' prediction intervals (OLS and WLS, with and without intercept)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from trendmill.engine.errors import SpecError
from trendmill.engine.predict import predict


def _data(rng, n=40, p=2):
    x = rng.normal(size=(n, p)) * [3.0, 0.5][:p] + [10.0, -2.0][:p]
    y = 1.5 + x @ np.array([0.7, -2.0][:p]) + rng.normal(scale=0.8, size=n)
    return x, y


@pytest.mark.parametrize("intercept", [True, False])
@pytest.mark.parametrize("weighted", [False, True])
def test_matches_statsmodels(intercept, weighted):
    rng = np.random.default_rng(42)
    x, y = _data(rng)
    design = sm.add_constant(x) if intercept else x
    w = rng.uniform(0.5, 2.0, size=len(y))
    model = (sm.WLS(y, design, weights=w) if weighted else sm.OLS(y, design)).fit()
    new = np.array([[9.0, -2.5], [15.0, 0.0], [0.0, 0.0]])
    new_design = sm.add_constant(new, has_constant="add") if intercept else new
    frame = model.get_prediction(new_design).summary_frame(alpha=0.1)
    got = predict(new, estimates=model.params, covariance=model.cov_params(),
                  residual_std_error=np.sqrt(model.scale), df_residual=int(model.df_resid),
                  confidence=0.9, intercept=intercept)
    err = f"intercept={intercept} weighted={weighted}"
    np.testing.assert_allclose(got.mean, frame["mean"], rtol=1e-12, err_msg=err)
    np.testing.assert_allclose(got.mean_std_error, frame["mean_se"], rtol=1e-12, err_msg=err)
    np.testing.assert_allclose(got.mean_ci_low, frame["mean_ci_lower"], rtol=1e-12, err_msg=err)
    np.testing.assert_allclose(got.mean_ci_high, frame["mean_ci_upper"], rtol=1e-12, err_msg=err)
    np.testing.assert_allclose(got.prediction_low, frame["obs_ci_lower"], rtol=1e-12, err_msg=err)
    np.testing.assert_allclose(got.prediction_high, frame["obs_ci_upper"], rtol=1e-12,
                               err_msg=err)


def test_flat_covariance_and_single_point():
    got = predict([2.0], estimates=[1.0, 3.0], covariance=[0.25, 0.0, 0.0, 0.04],
                  residual_std_error=0.5, df_residual=10, confidence=0.95)
    # Hand-computed: mean 7, se_mean = sqrt(0.25 + 4 * 0.04) = sqrt(0.41).
    assert got.mean[0] == pytest.approx(7.0, rel=1e-15)
    assert got.mean_std_error[0] == pytest.approx(np.sqrt(0.41), rel=1e-15)
    assert got.prediction_std_error[0] == pytest.approx(np.sqrt(0.41 + 0.25), rel=1e-15)


@pytest.mark.parametrize("kwargs, field, match", [
    (dict(x=[[1.0, 2.0]]), "points", "expected 1 feature"),
    (dict(x=[[np.nan]]), "points", "non-finite"),
    (dict(confidence=1.0), "confidence", "between 0 and 1"),
    (dict(df_residual=0), "df_residual", "at least 1"),
])
def test_bad_input_names_the_field(kwargs, field, match):
    args = dict(x=[[1.0]], estimates=[0.0, 1.0], covariance=np.eye(2), residual_std_error=1.0,
                df_residual=5, confidence=0.95)
    args.update(kwargs)
    x = args.pop("x")
    with pytest.raises(SpecError, match=match) as e:
        predict(x, **args)
    assert e.value.field == field

"""The declarative option table of the position-finding methods against the methods themselves."""

from __future__ import annotations

import inspect

import pytest

from tracker.blockmodel.fitting import FitSettings
from tracker.blockmodel.options import Option, check_options, check_request
from tracker.blockmodel.positions import METHOD_OPTIONS, METHODS, register_method
from tracker.errors import UsageError

#: Options the study API handles itself rather than the method class.
_HANDLED_BY_THE_API = {"joint", "max_iter", "tol"}  # joint=True runs tracker.blockmodel.sbm_dynamic instead


@pytest.mark.parametrize("method", sorted(METHOD_OPTIONS))
def test_every_declared_option_is_a_constructor_argument(method):
    """The table cannot promise what the class does not take (brute force over the table)."""
    if method == "dynamic":  # not a per-period method: its class is the dynamic model itself
        from tracker.models.dynamic import DynamicSBM

        cls = DynamicSBM
    else:
        cls = METHODS[method]
    params = inspect.signature(cls.__init__).parameters
    takes_any = any(p.kind is inspect.Parameter.VAR_KEYWORD for p in params.values())
    for name in METHOD_OPTIONS[method]:
        handled = method == "sbm" and name in _HANDLED_BY_THE_API
        assert name in params or takes_any or handled, (method, name)


@pytest.mark.parametrize("method", sorted(METHOD_OPTIONS))
def test_every_declared_choice_is_accepted_by_fit_settings(method):
    for name, option in METHOD_OPTIONS[method].items():
        values = option.choices or ([True] if option.kind is bool else [option.low if option.low is not None else 1])
        for value in values:
            assert FitSettings(method=method, options={name: value}).options[name] == value


def test_refusals_name_the_flag_and_the_methods_that_take_it():
    with pytest.raises(UsageError, match=r"--restarts does not apply to method structural; only dynamic, optimize and sbm"):
        FitSettings(method="structural", options={"restarts": 3})
    with pytest.raises(UsageError, match=r"--model \(method sbm\) takes one of poisson, bernoulli"):
        check_options("sbm", {"model": "gaussian"})
    with pytest.raises(UsageError, match=r"--restarts \(method optimize\) must be at least 1"):
        check_options("optimize", {"restarts": 0})
    with pytest.raises(UsageError, match=r"whole number"):
        check_options("optimize", {"restarts": 2.5})
    with pytest.raises(UsageError, match=r"unknown method"):
        check_options("astrology", {})
    # options a program passes internally are not user options
    assert check_options("optimize", {"init_labels": [0, 1]}) == {"init_labels": [0, 1]}


def test_a_registered_method_declares_its_options():
    class Fixed:
        def __init__(self, n_positions, *, seed=0, width=1):
            self.n_positions, self.width = n_positions, width

    register_method("fixed-test", Fixed, options={"width": Option("width", int, "--width", low=1)})
    try:
        assert FitSettings(method="fixed-test", options={"width": 2}).options == {"width": 2}
        with pytest.raises(UsageError, match="--width"):
            FitSettings(method="fixed-test", options={"width": 0})
    finally:
        del METHODS["fixed-test"]
        METHOD_OPTIONS.pop("fixed-test", None)


def test_degenerate_requests():
    with pytest.raises(UsageError, match="more than half of the 10 actors"):
        check_request(FitSettings(positions=6), tied=[10, 8])
    assert check_request(FitSettings(positions=5), tied=[10, 10]) == []
    warnings = check_request(FitSettings(positions=5), tied=[10, 6])
    assert len(warnings) == 1 and "1 period" in warnings[0]
    with pytest.raises(UsageError, match="--k-range"):
        check_request(FitSettings(positions=3), k_range_given=True)
    with pytest.raises(UsageError, match="--exact"):
        check_request(FitSettings(method="regular", positions=3, options={"exact": True}))
    assert check_request(FitSettings(method="regular", positions="auto", options={"exact": True})) == []


def test_smooth_words_and_numbers():
    # Source: the --smooth help text: auto, off (also "none", "no") or a number.
    from tracker.blockmodel.options import smoothing_value

    assert smoothing_value(None) is None and smoothing_value("auto") == "auto"
    assert [smoothing_value(w) for w in ("off", "none", "no", "OFF", 0, "0", "1.5", 2)] == [0, 0, 0, 0, 0, 0, 1.5, 2]
    for bad in ("soft", "nan", "inf", ""):
        with pytest.raises(UsageError, match="--smooth takes auto, off or a number"):
            smoothing_value(bad)


def test_any_smoothing_given_with_the_dynamic_model_is_refused():
    # The dynamic model has no change penalty: --smooth off would relabel the fit, not change it.
    for value in (0.0, 1.5):
        for settings in (FitSettings(smoothing=value), FitSettings(method="dynamic", smoothing=value)):
            with pytest.raises(UsageError, match="--smooth does not apply to the dynamic model"):
                check_request(settings, smoothing_given=True)
    assert check_request(FitSettings(smoothing=0.0)) == []  # the recorded "no penalty", not given by the user
    for method in ("sbm", "structural"):  # the fixes the refusal names
        assert check_request(FitSettings(method=method, smoothing=0.0), smoothing_given=True) == []

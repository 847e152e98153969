"""What each position-finding method accepts: one declarative table, one check.

Every method of :data:`tracker.blockmodel.positions.METHODS` declares the
options it takes in :data:`tracker.blockmodel.positions.METHOD_OPTIONS` as
:class:`Option` entries (name, command-line flag, type, allowed values or
range).  :func:`check_options` refuses an option the chosen method does not
take, or a value outside its range, with a :class:`~tracker.errors.UsageError`
that names the flag; :func:`check_request` adds the rules that tie options
to each other and to the data (``--exact`` with a fixed number of positions,
``--alpha`` without the density criterion, more positions than half the tied
actors ...).

Options a program passes internally (``init_labels``, ``prior_labels``,
``change_penalty`` used by smoothing) are not user options and are not
checked here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

from tracker.errors import UsageError

__all__ = ["Option", "check_options", "check_request", "method_flags", "smoothing_value", "INTERNAL_OPTIONS"]

#: Options that programs (smoothing, bootstrap) hand to a method; never given by a user.
INTERNAL_OPTIONS = ("init_labels", "prior_labels", "change_penalty")


@dataclass(frozen=True)
class Option:
    """One option a method accepts.

    ``kind`` is ``bool``, ``int``, ``float`` or ``str``; ``choices`` lists the
    allowed values of a ``str`` option; ``low``/``high`` bound a number (both
    included); ``flag`` is how the command line spells it.
    """

    name: str
    kind: type
    flag: str | None = None
    choices: tuple | None = None
    low: float | None = None
    high: float | None = None
    help: str = ""

    @property
    def shown(self) -> str:
        return self.flag or self.name

    def check(self, value: Any, method: str) -> Any:
        """The value converted to ``kind``; a UsageError naming the option when it does not fit."""
        what = f"{self.shown} (method {method})"
        if self.kind is bool:
            if not isinstance(value, bool):
                raise UsageError(f"{what} is a switch (true or false), not {value!r}")
            return value
        if self.kind in (int, float):
            if isinstance(value, bool):
                raise UsageError(f"{what} takes a number, not {value!r}")
            try:
                number = self.kind(value)
            except (TypeError, ValueError):
                raise UsageError(f"{what} takes a {'whole number' if self.kind is int else 'number'}, not {value!r}") from None
            if self.kind is int and number != float(value):
                raise UsageError(f"{what} takes a whole number, not {value!r}")
            if not math.isfinite(number):
                raise UsageError(f"{what} takes a finite number, not {value!r}")
            if self.low is not None and number < self.low:
                raise UsageError(f"{what} must be at least {self.low:g}, not {value!r}")
            if self.high is not None and number > self.high:
                raise UsageError(f"{what} must be at most {self.high:g}, not {value!r}")
            return number
        if not isinstance(value, str):
            raise UsageError(f"{what} takes a word, not {value!r}")
        if self.choices is not None and value not in self.choices:
            raise UsageError(f"{what} takes one of {', '.join(self.choices)}, not {value!r}")
        return value


def _table() -> Mapping[str, Mapping[str, Option]]:
    from tracker.blockmodel.positions import METHOD_OPTIONS

    return METHOD_OPTIONS


def _only(takers: list[str]) -> str:
    """'only sbm takes it' / 'only optimize and sbm take it'."""
    if len(takers) == 1:
        return f"only {takers[0]} takes it"
    return f"only {', '.join(takers[:-1])} and {takers[-1]} take it"


def method_flags() -> dict[str, set[str]]:
    """Flag -> the methods that accept it (for help texts and tests)."""
    out: dict[str, set[str]] = {}
    for method, spec in _table().items():
        for option in spec.values():
            out.setdefault(option.shown, set()).add(method)
    return out


def check_options(method: str, options: Mapping[str, Any]) -> dict:
    """The user's method options, checked against the method's declared table.

    Raises
    ------
    UsageError
        For an option the method does not take (naming the methods that do),
        or a value of the wrong type or outside its range.
    """
    from tracker.blockmodel.positions import METHODS

    table = _table()
    if method not in METHODS and method not in table:
        raise UsageError(f"unknown method {method!r}; use one of: {', '.join([*table, *(m for m in METHODS if m not in table)])}")
    if method not in table:
        return dict(options)  # a method registered without a table takes what it takes
    spec = table[method]
    out = {}
    for name, value in options.items():
        if name in INTERNAL_OPTIONS:
            out[name] = value
            continue
        if name not in spec:
            takers = sorted(m for m, s in table.items() if name in s)
            flag = next((s[name].shown for s in table.values() if name in s), name)
            if takers:
                raise UsageError(f"{flag} does not apply to method {method}; {_only(takers)}")
            known = ", ".join(o.shown for o in spec.values()) or "none"
            raise UsageError(f"unknown option {name!r} for method {method}; it takes: {known}")
        out[name] = spec[name].check(value, method)
    return out


#: Words that ask for no smoothing penalty (``--smooth off``).
SMOOTHING_OFF = ("off", "none", "no")


def smoothing_value(value: Any) -> float | str | None:
    """``--smooth`` as given (a word or a number) as a setting: ``None`` (not given), ``"auto"`` or ``c >= 0``.

    ``off``, ``none`` and ``no`` are 0 (each period fitted alone); any other
    word is refused.  Whether the chosen method takes the value is checked
    by :func:`check_request`.
    """
    if value is None or value == "auto":
        return value
    if isinstance(value, str) and value.strip().lower() in SMOOTHING_OFF:
        return 0.0
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = math.nan
    if not math.isfinite(number):
        raise UsageError(f"--smooth takes auto, off or a number, not {value!r}")
    return number


def check_request(
    settings,
    *,
    tied: Sequence[int] = (),
    smoothing_given: bool = False,
    k_range_given: bool = False,
) -> list[str]:
    """Rules across options and against the data; returns warnings, raises for refusals.

    Parameters
    ----------
    settings : tracker.blockmodel.fitting.FitSettings
    tied : sequence of int
        Actors with at least one tie in each period to fit.
    smoothing_given, k_range_given : bool
        Whether the user set ``--smooth`` / ``--k-range`` (rather than the default).

    Refusals (UsageError): ``--k-range`` without ``--positions auto``;
    ``--exact`` with a fixed number of positions (the exact regular partition
    finds its own number); ``--alpha`` without ``--criterion density`` and
    ``--cut`` without ``--criterion max-value``; ``--linkage ward`` with
    ``--measure correlation``; ``--smooth`` with a method it
    does not apply to (any ``--smooth``, ``off`` included, with the dynamic
    model, which has no change penalty); ``--degree-corrected`` with the Bernoulli model; more
    positions than half the tied actors of the largest period (each
    position would hold one or two actors, a "perfect fit" by construction).
    Warnings: periods where the positions asked for exceed half of that
    period's tied actors.
    """
    opts = settings.options
    auto = settings.positions == "auto"
    if k_range_given and not auto:
        raise UsageError("--k-range is the range tried by --positions auto; add --positions auto or drop --k-range")
    if opts.get("exact") and not auto:
        raise UsageError("--exact finds its own number of positions (the coarsest exact regular partition); "
                         "use --positions auto with --exact, or drop --exact to get a fixed number")
    if settings.alpha is not None and settings.criterion != "density":
        raise UsageError("--alpha is the threshold of --criterion density; add --criterion density or drop --alpha")
    if settings.cut is not None and settings.criterion != "max-value":
        raise UsageError("--cut is the threshold of --criterion max-value; add --criterion max-value or drop --cut")
    if opts.get("linkage") == "ward" and opts.get("measure") == "correlation":
        raise UsageError("--linkage ward needs Euclidean distances; use --measure euclidean or another --linkage")
    if opts.get("degree_corrected") and opts.get("model") == "bernoulli":
        raise UsageError("--degree-corrected works with the Poisson model only; drop --model bernoulli or --degree-corrected")
    if smoothing_given and (settings.method == "dynamic" or opts.get("joint")):
        # Not even "off": the model has no penalty to turn off, so accepting it would suggest that
        # the periods were fitted one by one when one model over all periods ran.
        raise UsageError("--smooth does not apply to the dynamic model (the default method): its Markov chain "
                         "links the periods and it has no change penalty to set or turn off; drop --smooth, or "
                         "to fit each period alone choose a descriptive method, e.g. --method sbm --smooth off "
                         "or --method structural --smooth off")
    if smoothing_given and settings.smoothing != 0:
        from tracker.longitudinal.smoothing import smoothing_penalty

        smoothing_penalty(settings.method, settings.smoothing)  # refuses a penalty the method cannot honour
    warnings = []
    tied = [int(t) for t in tied]
    if not auto and tied:
        k = int(settings.positions)
        most = max(tied)
        if most and k > most / 2:
            raise UsageError(
                f"--positions {k} is more than half of the {most} actors with ties in the largest period: "
                f"positions of one or two actors fit perfectly by construction and say nothing; "
                f"use at most {max(most // 2, 1)} or --positions auto"
            )
        small = sum(1 for t in tied if t and k > t / 2)
        if small:
            warnings.append(f"in {small} period(s) fewer than {2 * k} actors have ties, so some of the {k} positions "
                            "hold one or two actors; consider fewer positions or --positions auto")
    if auto and tied and settings.k_max > max(tied) / 2 and max(tied) >= 2:
        warnings.append(f"--k-range goes up to {settings.k_max} but the largest period has {max(tied)} tied actors; "
                        "K above half of them is not informative")
    return warnings

"""Which law to fit, and the candidate laws it is compared with by AIC and BIC.

The chosen law and order come from the caller (``--law``, ``--order``) or from the
recipe's current kinetics (the *prior*); every candidate is fitted to the same
assays (the chosen fit's outliers left out) at the activity spread the chosen fit
found, so their AIC/BIC compare the laws on equal terms.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from ..batch.kinetics import Kinetics
from ..errors import ConfigError, DataQualityError, UsageError
from ..physics.plant_fit import FitSeries, PlantFit, WarningKind, excluded_mask, fit_batches
from .progress import FitProgress

#: Highest order accepted by ``--order`` [-] (the fit's own bound is the same).
MAX_ORDER = 5.0
#: The activity spread assumed when neither a fit nor a prior gives one [-].
DEFAULT_ACTIVITY_SD = 0.05
#: Start of theta_r for an autocatalytic fit with no autocatalytic prior [-].
THETA_R_START = 0.01


@dataclass(frozen=True)
class LawChoice:
    """The law to fit, its order (a number or ``"free"``) and where the order came from."""

    rate_law: str
    order: float | str
    order_source: str  # "given", "prior", "assumed" (no --order and no prior), "law"


@dataclass(frozen=True)
class Candidate:
    """One candidate law's fit statistics on the chosen fit's assays."""

    rate_law: str
    order: float | str | None  # fitted order for a free one
    order_free: bool
    label: str
    aic: float | None  # None: the candidate could not be fitted (see note)
    bic: float | None
    rmse: float | None
    n_params: int | None
    chosen: bool
    note: str
    delta_aic: float | None = None
    delta_bic: float | None = None

    def as_dict(self) -> dict:
        return {
            "rate_law": self.rate_law,
            "order": self.order,
            "order_free": self.order_free,
            "label": self.label,
            "aic": self.aic,
            "bic": self.bic,
            "delta_aic": self.delta_aic,
            "delta_bic": self.delta_bic,
            "rmse": self.rmse,
            "n_params": self.n_params,
            "chosen": self.chosen,
            "note": self.note,
        }


def parse_order(order) -> float | str | None:
    """``--order``: a number in [0, `MAX_ORDER`], ``"free"``, or None."""
    if order is None or isinstance(order, float | int):
        return None if order is None else float(order)
    text = str(order).strip().lower()
    if text == "free":
        return "free"
    try:
        value = float(text)
    except ValueError:
        raise UsageError(f"--order: expected a number or 'free', got {order!r}") from None
    if not 0 <= value <= MAX_ORDER:
        raise UsageError(f"--order: expected an order between 0 and 5, got {value:g}")
    return value


def choose_law(law: str | None, order, prior: Kinetics | None, where) -> LawChoice:
    """The law and order to fit: as given, else the prior's, else first order."""
    if law is None:
        if prior is None:
            raise UsageError(f"no current kinetics file ({where}): give --law")
        law = prior.rate_law
    parsed = parse_order(order)
    if law != "power":
        return LawChoice(law, 2.0, "law")
    if parsed is not None:
        return LawChoice(law, parsed, "given")
    if prior is not None and prior.rate_law == "power":
        return LawChoice(law, prior.order, "prior")
    return LawChoice(law, 1.0, "assumed")


def law_params(law: str, prior: Kinetics | None, *, where) -> dict:
    """The fixed keywords of ``law`` (theta_b, b, theta_r start, epsilon) from the prior."""
    same = prior is not None and prior.rate_law == law
    params = {"epsilon": prior.epsilon if prior is not None else 0.0}
    if law == "bimolecular":
        if not same or prior.theta_b is None:
            raise ConfigError(
                "the bimolecular law needs theta_b (and b) from the recipe's current kinetics file",
                path=where,
                key="theta_b",
            )
        params.update(theta_b=prior.theta_b, b=prior.b)
    elif law == "autocatalytic":
        theta_r = prior.theta_r if same and prior.theta_r > 0 else THETA_R_START
        params.update(theta_r=theta_r)
    elif law == "reversible":
        raise UsageError(
            "--law reversible: the reversible law is not separable and cannot be "
            "fitted by this command yet (fit power, bimolecular or autocatalytic)"
        )
    return params


def candidate_laws(prior: Kinetics | None) -> list[tuple[str, float | str]]:
    """The laws compared with the chosen one: power 1, 2, free, and what the prior allows."""
    out: list[tuple[str, float | str]] = [("power", 1.0), ("power", 2.0), ("power", "free")]
    if prior is not None and prior.theta_b is not None:
        out.append(("bimolecular", 2.0))
    if prior is not None and prior.theta_r > 0:
        out.append(("autocatalytic", 2.0))
    return out


@dataclass
class FitRunner:
    """Fits one law to the series with the job's settings and the prior's values."""

    series: list[FitSeries]
    prior: Kinetics | None
    where: Path | None
    per_batch_activity: bool
    sd_known: bool
    progress: FitProgress | None = None

    def _on_iteration(self, n: int) -> None:
        if self.progress is not None:
            self.progress.iteration(n)

    def fit(self, law, order, *, exclude=None, outlier_sigma=None, tau=None) -> PlantFit:
        """One fit; ``tau`` given holds the activity spread there (no EM of its own)."""
        prior = self.prior
        params = law_params(law, prior, where=self.where)
        same = prior is not None and prior.rate_law == law
        return fit_batches(
            self.series,
            law,
            order,
            law_params=params,
            per_batch_activity=self.per_batch_activity,
            ea_prior_j_per_mol=prior.ea_j_per_mol if prior is not None else None,
            order_prior=prior.order if same and law == "power" else None,
            theta_r_prior=prior.theta_r if same and prior.theta_r > 0 else None,
            activity_sd_start=tau or (prior.activity_sd if prior else DEFAULT_ACTIVITY_SD),
            fit_activity_sd=tau is None,
            free_law_params=("theta_r",) if law == "autocatalytic" else (),
            outlier_sigma=outlier_sigma,
            exclude=exclude,
            sd_known=self.sd_known,
            on_iteration=self._on_iteration,
        )

    def stage(self, text: str) -> None:
        if self.progress is not None:
            self.progress.stage(text)


def _label(law: str, order) -> str:
    return law + (f" n={order}" if law == "power" else "")


def _candidate(fit: PlantFit, law, order, chosen: bool) -> Candidate:
    unidentified = [w.message for w in fit.warnings if w.kind == WarningKind.UNIDENTIFIABLE]
    return Candidate(
        rate_law=law,
        order=fit.order if order == "free" else order,
        order_free=order == "free",
        label=_label(law, order),
        aic=fit.aic,
        bic=fit.bic,
        rmse=fit.rmse,
        n_params=fit.n_params,
        chosen=chosen,
        note="; ".join(unidentified),
    )


def _with_deltas(cands: list[Candidate]) -> list[Candidate]:
    """Each candidate's AIC and BIC above the best of the successful ones."""
    ok = [c for c in cands if c.aic is not None]
    best_aic = min((c.aic for c in ok), default=None)
    best_bic = min((c.bic for c in ok), default=None)
    out = []
    for c in cands:
        d_aic = None if c.aic is None or best_aic is None else c.aic - best_aic
        d_bic = None if c.bic is None or best_bic is None else c.bic - best_bic
        out.append(replace(c, delta_aic=d_aic, delta_bic=d_bic))
    return out


def fit_chosen(runner: FitRunner, choice: LawChoice, *, outlier_sigma: float | None) -> PlantFit:
    """The chosen law's fit (outliers beyond ``outlier_sigma`` left out and listed)."""
    law, order = choice.rate_law, choice.order
    runner.stage(f"fitting {law}" + (f", order {order}" if law == "power" else ""))
    try:
        return runner.fit(law, order, outlier_sigma=outlier_sigma)
    except ValueError as exc:
        raise DataQualityError(f"the fit failed: {exc}") from None


def compare_candidates(runner: FitRunner, choice: LawChoice, main: PlantFit) -> list[Candidate]:
    """Every candidate law on the chosen fit's assays, at its activity spread (AIC, BIC)."""
    law, order = choice.rate_law, choice.order
    mask = excluded_mask(main)
    cands = []
    for law_c, order_c in dict.fromkeys(candidate_laws(runner.prior) + [(law, order)]):
        if (law_c, order_c) == (law, order):
            cands.append(_candidate(main, law_c, order_c, chosen=True))
            continue
        runner.stage(f"candidate {_label(law_c, order_c)}")
        try:
            fit = runner.fit(law_c, order_c, exclude=mask, tau=main.activity_sd)
        except (ValueError, ConfigError) as exc:
            failed = Candidate(
                rate_law=law_c,
                order=order_c,
                order_free=order_c == "free",
                label=_label(law_c, order_c),
                aic=None,
                bic=None,
                rmse=None,
                n_params=None,
                chosen=False,
                note=str(exc),
            )
            cands.append(failed)
            continue
        cands.append(_candidate(fit, law_c, order_c, chosen=False))
    return _with_deltas(cands)


__all__ = [
    "Candidate",
    "FitRunner",
    "LawChoice",
    "candidate_laws",
    "choose_law",
    "compare_candidates",
    "fit_chosen",
    "law_params",
    "parse_order",
]

"""Is the straight line adequate? The lack-of-fit split, Mandel's test, spread across levels,
and replicate-free checks when no setting was repeated.

Sources: Kutner, Nachtsheim, Neter & Li (2005) §3.7 for the pure-error test; ISO 8466-1 for
Mandel's test; Brown & Forsythe (1974) for the spread test; statsmodels for RESET, rainbow and
Harvey–Collier. Joglekar, Schuenemeyer & LaRiccia (1989) and Christensen (1989) for groups
formed by a tolerance (the model tested against itself plus group indicators).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import DataError
from ..numfmt import count, fmt_p
from ..stats.design import poly_design
from ..stats.dist import f_sf
from ..stats.groups import GroupStats
from ..stats.linalg import Column, Design, fit_design
from ..stats.results import AnovaRow, Criteria, Fit, LevelRow, SideTest, criteria_from
from ..stats.rows import Rows
from ..stats.study import Study
from .lack_of_fit import lack_of_fit, nested_f
from .replicate_free import replicate_free
from .results import LackOfFit

__all__ = ["CheckResult", "check", "pure_error", "MANDEL_ALPHA"]


MANDEL_ALPHA = 0.01


def pure_error(study: Study) -> tuple[float, int]:
    """Pooled pure-error sum of squares and its df for the study's x levels (unweighted)."""
    z, _ = study.transformed(_identity())
    stats = study.group_stats(z, ("z", _identity().key()))
    if stats.df_pure <= 0:
        raise DataError(
            f"no level of {study.x_name!r} is replicated in {study.source}; pure error needs repeated "
            "measurements (or --tolerance to group near-equal settings)"
        )
    return stats.ss_pure, stats.df_pure


def _mandel(fit1: Fit, fit2: Fit | None, n: int, c: int) -> SideTest:
    name = "curvature (Mandel, ISO 8466-1)"
    if fit2 is None or c < 3:
        return SideTest(name, False, reason="needs at least 3 levels of x")
    if n - 3 <= 0 or fit2.sse <= 0:
        return SideTest(name, False, reason="the quadratic leaves no residual variation to compare with")
    pg = (fit1.sse - fit2.sse) / (fit2.sse / (n - 3))
    pg = max(pg, 0.0)
    return SideTest(
        name, True, pg, (1, n - 3), f_sf(pg, 1, n - 3),
        reason="partial F for adding x²; ISO 8466-1 judges it at the 99% level", alpha=MANDEL_ALPHA,
        method="Mandel",
    )


@dataclass(frozen=True, slots=True)
class CheckResult:
    """Everything ``bendwise check`` reports about the straight line on one study."""

    source: str
    """Data file name."""
    y_name: str
    """Response column."""
    x_name: str
    """Predictor column."""
    n: int
    """Rows used."""
    n_dropped: int
    """Rows dropped in cleaning (see ``cleaning``)."""
    cleaning: tuple[str, ...]
    """One line per reason rows were dropped."""
    levels: int
    """Distinct settings (replicate groups) of x."""
    replicated_levels: int
    """Levels measured more than once."""
    tolerance: str | None
    """Tolerance used to group near-equal settings (None: exact values)."""
    grouped_approximately: bool
    """True when the tolerance merged distinct values: the test is then approximate."""
    weights: str | None
    """Weights column (None: unweighted)."""
    alpha: float
    """Level of the verdict."""
    fit: Fit
    """The straight-line fit."""
    anova: tuple[AnovaRow, ...]
    """Model / residual / lack of fit / pure error / total."""
    lack_of_fit: LackOfFit
    """The lack-of-fit test (or the reason it is unavailable)."""
    level_rows: tuple[LevelRow, ...]
    """Per-level summary."""
    mandel: SideTest
    """Mandel's curvature test."""
    spread: SideTest
    """Brown–Forsythe test of equal spread across levels."""
    replicate_free: tuple[SideTest, ...]
    """RESET, rainbow, Harvey–Collier when no level is replicated (approximate)."""
    criteria: Criteria
    """Log-likelihood and information criteria of the line."""
    verdict: str
    """The answer in words."""
    lack_found: bool | None
    """True when lack of fit is significant at alpha; None when untestable."""

    def to_dict(self) -> dict:
        """Stable JSON shape (names documented in the README)."""
        return {
            "source": self.source,
            "response": self.y_name,
            "predictor": self.x_name,
            "n": self.n,
            "n_dropped": self.n_dropped,
            "cleaning": list(self.cleaning),
            "levels": self.levels,
            "replicated_levels": self.replicated_levels,
            "tolerance": self.tolerance,
            "grouped_approximately": self.grouped_approximately,
            "weights": self.weights,
            "alpha": self.alpha,
            "coefficients": {
                c.name: {"estimate": c.estimate, "se": c.se, "t": c.t, "p": c.p, "low": c.low, "high": c.high}
                for c in self.fit.coefficients
            },
            "sigma": self.fit.sigma,
            "r2": self.fit.r2,
            "r2_adj": self.fit.r2_adj,
            "sse": self.fit.sse,
            "df_resid": self.fit.df_resid,
            "anova": [
                {"source": r.source, "df": r.df, "ss": r.ss, "ms": r.ms, "f": r.f, "p": r.p} for r in self.anova
            ],
            "lack_of_fit": self.lack_of_fit.as_json(),
            "lack_found": self.lack_found,
            "verdict": self.verdict,
            "per_level": [
                {"level": r.level, "x": r.x, "n": r.n, "mean": r.mean, "sd": r.sd, "fitted": r.fitted, "residual": r.residual}
                for r in self.level_rows
            ],
            "mandel": self.mandel.as_json(),
            "spread": self.spread.as_json(),
            "replicate_free": [t.as_json() for t in self.replicate_free],
            "criteria": self.criteria.as_json(),
        }

    as_json = to_dict

    def summary(self) -> str:
        """Plain text: the data, the lack-of-fit test and the verdict (the CLI's closing lines)."""
        lines = [f"{self.y_name} against {self.x_name} · {count(self.n, 'row')} · {count(self.levels, 'level')} "
                 f"({self.replicated_levels} replicated)"]
        lines.append(f"lack of fit ({self.lack_of_fit.kind}): {self.lack_of_fit.summary()}")
        for t in (self.mandel, self.spread):
            lines.append(f"{t.name}: {t.summary()}")
        lines.append(self.verdict)
        return "\n".join(lines)


def _line_and_quadratic(study: Study) -> tuple[GroupStats, Fit, Fit | None, LackOfFit]:
    """Fit the line (and quadratic) and test lack of fit, exact or near-replicate."""
    w = study.weights
    wkey = study.weights_name
    lv = study.x_level_values
    z, _ = study.transformed(_identity())
    zkey = ("z", _identity().key())
    if not study.approximate_groups:
        stats = study.group_stats(z, zkey, weights=w, weights_key=wkey)
        line = poly_design(lv, 1, name=study.x_name)
        fit1 = fit_design(stats, line)
        fit2 = fit_design(stats, poly_design(lv, 2, name=study.x_name)) if study.c >= 3 else None
        lof = lack_of_fit(stats, fit1, approximate=w is not None and False)
        return stats, fit1, fit2, lof
    # Near replicates: x varies inside a group, so powers of x are within-varying bases.
    lo, hi = study.x_min, study.x_max
    centre, scale = (lo + hi) / 2, (hi - lo) / 2

    def build() -> np.ndarray:
        u = (study.x - centre) / scale
        return np.column_stack([u, u * u])

    bkey = ("u", centre, scale, 2)
    bases = study.base_rows(bkey, build)
    stats = study.group_stats(z, zkey, weights=w, weights_key=wkey, bases=bases, bases_key=bkey)
    line = poly_design(lv, 1, name=study.x_name, centre=centre, scale=scale, base_offset=0)
    fit1 = fit_design(stats, line)
    fit2 = fit_design(stats, poly_design(lv, 2, name=study.x_name, centre=centre, scale=scale, base_offset=0)) if study.c >= 3 else None
    # Richer model: one mean per group plus the within-group slope on x.
    indicators = tuple(Column((np.arange(stats.c) == g).astype(float)) for g in range(stats.c))
    full = Design(indicators + (Column(np.ones(stats.c), 0),), tuple(f"g{g}" for g in range(stats.c + 1)),
                  np.eye(stats.c + 1, dtype=np.longdouble))
    full_fit = fit_design(stats, full)
    if stats.c <= fit1.rank:
        lof = LackOfFit(False, f"the line saturates the {stats.c} groups; use a smaller tolerance", "near-replicate (approximate)")
    else:
        lof = nested_f(fit1.sse, fit1.df_resid, full_fit.sse, full_fit.df_resid, "near-replicate (approximate)", True)
    return stats, fit1, fit2, lof


def check(study: Study, *, alpha: float = 0.05) -> CheckResult:
    """Test the straight line y ~ x on the study: the lack-of-fit split and supporting checks."""
    if not 0 < alpha < 1:
        from ..errors import UsageError

        raise UsageError(f"alpha {alpha!r} must lie strictly between 0 and 1, e.g. 0.05")
    stats, fit1, fit2, lof = _line_and_quadratic(study)
    n, c = study.n, study.c
    z, _ = study.transformed(_identity())
    return CheckResult(
        source=study.source,
        y_name=study.y_name,
        x_name=study.x_name,
        n=n,
        n_dropped=study.report.n_dropped,
        cleaning=tuple(study.report.lines()),
        levels=c,
        replicated_levels=int((stats.count > 1).sum()),
        tolerance=study.tolerance_text,
        grouped_approximately=study.approximate_groups,
        weights=study.weights_name,
        alpha=alpha,
        fit=fit1,
        anova=_anova_rows(fit1, lof, n),
        lack_of_fit=lof,
        level_rows=_level_rows(study, stats, fit1),
        mandel=_mandel(fit1, fit2, n, c),
        spread=study.spread_by_level(z, (_identity().key(), None), None),
        replicate_free=_replicate_free_checks(study),
        criteria=criteria_from(fit1.loglik, fit1.rank + 1, n),
        verdict=_verdict(lof, alpha, study),
        lack_found=None if not lof.testable else bool(lof.p < alpha),  # type: ignore[operator]
    )


def _anova_rows(fit1: Fit, lof: LackOfFit, n: int) -> tuple[AnovaRow, ...]:
    """The split of the total sum of squares: model, residual, (lack of fit, pure error), total."""
    ss_tot = fit1.ss_total
    ss_model = max(ss_tot - fit1.sse, 0.0)
    df_model = fit1.rank - 1
    ms_resid = fit1.sse / fit1.df_resid if fit1.df_resid > 0 else None
    f_model = (ss_model / df_model) / ms_resid if ms_resid and df_model > 0 else None
    rows = [
        AnovaRow("model", df_model, ss_model, ss_model / df_model if df_model else None, f_model,
                 f_sf(f_model, df_model, fit1.df_resid) if f_model is not None else None),
        AnovaRow("residual", fit1.df_resid, fit1.sse, ms_resid, None, None),
    ]
    if lof.testable:
        ms_lack = lof.ss_lack / lof.df_lack  # type: ignore[operator]
        ms_pure = lof.ss_pure / lof.df_pure  # type: ignore[operator]
        rows.append(AnovaRow("lack of fit", lof.df_lack, lof.ss_lack, ms_lack, lof.f, lof.p))  # type: ignore[arg-type]
        rows.append(AnovaRow("pure error", lof.df_pure, lof.ss_pure, ms_pure, None, None))  # type: ignore[arg-type]
    rows.append(AnovaRow("total", n - 1, ss_tot, None, None, None))
    return tuple(rows)


def _level_rows(study: Study, stats: GroupStats, fit1: Fit) -> tuple[LevelRow, ...]:
    """One row per level: x, count, mean, SD (replicated levels), fitted value and residual."""
    centre_x, scale_x = (study.x_min + study.x_max) / 2, (study.x_max - study.x_min) / 2
    counts = stats.count
    sd = np.sqrt(np.where(counts > 1, stats.ss / np.maximum(counts - 1, 1), np.nan))
    fitted = np.asarray(fit1.group_fitted)
    if study.approximate_groups:
        xbar = stats.base_mean[:, 0] * scale_x + centre_x
    else:
        xbar = study.x_level_values
    return tuple(
        LevelRow(study.x_level_labels[g], float(xbar[g]), int(counts[g]), float(stats.mean[g]),
                 None if counts[g] < 2 else float(sd[g]), float(fitted[g]), float(stats.mean[g] - fitted[g]))
        for g in range(stats.c)
    )


def _replicate_free_checks(study: Study) -> tuple[SideTest, ...]:
    """Checks that need no replicates, when some levels are not replicated exactly (rows in memory)."""
    if study.exact_replicates():
        return ()
    if not isinstance(study.rows(), Rows):
        return (SideTest("replicate-free checks", False, reason="need the rows in memory; use --engine memory"),)
    return replicate_free(study) if study.n >= 6 else ()


def _identity():
    from ..stats.transforms import IDENTITY

    return IDENTITY


def _verdict(lof: LackOfFit, alpha: float, study: Study) -> str:
    approx = " (approximate: settings were grouped by a tolerance)" if lof.approximate else ""
    if not lof.testable:
        return f"The lack-of-fit test cannot be run: {lof.reason}."
    stat = f"F = {lof.f:.4g} on {lof.df_lack} and {lof.df_pure} df, p = {fmt_p(lof.p)}"
    if lof.p < alpha:  # type: ignore[operator]
        return (
            f"NOT A STRAIGHT LINE: the level means depart from the line by more than the replicates "
            f"scatter ({stat} < α = {alpha:g}){approx}. Try a remedy: bendwise grow."
        )
    return (
        f"LINE ADEQUATE: no evidence of lack of fit at α = {alpha:g} ({stat}){approx}. "
        "This is absence of evidence, not proof: check the power with bendwise plan."
    )



"""hazardline for Python: the command-line tool's numerical core (the standard CDS contract,
discount and hazard curves, the hazard bootstrap, CIR, the backtest statistics) called from
Python, and its run folders read as polars LazyFrames.

Dates are ``datetime.date``, ISO strings, numpy ``datetime64`` or day numbers; spreads and
coupons are decimals unless a name ends in ``_bp``; upfronts are fractions of notional.

The figures support, and do not replace, independent model validation under the
institution's model risk policy and the supervisory rules that apply to it.
"""

from ._core import HazardlineError
from .bootstrap import HAZARD_CURVES_SCHEMA, bootstrap, curve_from_nodes
from .cir import cir_forward_hazard, cir_par_spreads, cir_survival, fit_cir
from .contract import (
    Contract,
    CouponPeriod,
    Legs,
    cs01,
    flat_hazard_of_spread,
    price_legs,
    spread_to_upfront,
    upfront_to_spread,
)
from .curves import WEEKENDS_ONLY, Calendar, DiscountCurve, HazardCurve, discount_curves_from_table
from .run import Run, read_run
from .stats import (
    auc_delong,
    auc_paired,
    binomial_lower_tail,
    binomial_upper_tail,
    clopper_pearson,
    hosmer_lemeshow,
    jeffreys_interval,
    jeffreys_p_value,
    supervisory_corporate_correlation,
    traffic_light,
    vasicek_count_interval,
    vasicek_lower_tail,
    vasicek_upper_tail,
    wilson_interval,
)

__all__ = [
    "HazardlineError",
    "Calendar",
    "WEEKENDS_ONLY",
    "DiscountCurve",
    "HazardCurve",
    "discount_curves_from_table",
    "Contract",
    "CouponPeriod",
    "Legs",
    "price_legs",
    "flat_hazard_of_spread",
    "spread_to_upfront",
    "upfront_to_spread",
    "cs01",
    "bootstrap",
    "curve_from_nodes",
    "HAZARD_CURVES_SCHEMA",
    "cir_survival",
    "cir_forward_hazard",
    "cir_par_spreads",
    "fit_cir",
    "clopper_pearson",
    "jeffreys_interval",
    "wilson_interval",
    "binomial_upper_tail",
    "binomial_lower_tail",
    "jeffreys_p_value",
    "vasicek_upper_tail",
    "vasicek_lower_tail",
    "vasicek_count_interval",
    "supervisory_corporate_correlation",
    "hosmer_lemeshow",
    "auc_delong",
    "auc_paired",
    "traffic_light",
    "Run",
    "read_run",
]
__version__ = "0.1.0"

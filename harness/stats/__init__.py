"""Statistics for comparing groups of seeds: pure functions on arrays that know nothing of RL.

Every test returns a frozen result object carrying its estimate, p-value or
interval, the method's name and a one-sentence ``reading``. Inputs are checked:
fewer than two values per group, NaN or infinity, a margin that is not
positive, or a level outside (0, 1) raise a ``ValueError`` naming the
parameter; constant groups give a documented degenerate result, never NaN.
See ``docs/statistics.md`` for the methods, their references and their
calibration.
"""

from harness.stats._result import ConfidenceInterval
from harness.stats._validate import ALTERNATIVES, Alternative
from harness.stats.aggregate import (
    bootstrap_iqm,
    bootstrap_probability_of_improvement,
    bootstrap_task_mean,
    iqm,
    probability_of_improvement,
    task_mean,
)
from harness.stats.boundaries import (
    BOUNDARY_KINDS,
    SequentialBoundaries,
    exit_probabilities,
    sequential_boundaries,
    spending_function,
)
from harness.stats.bootstrap import (
    BOOTSTRAP_METHODS,
    BootstrapResult,
    bootstrap_ci,
    bootstrap_mean,
    bootstrap_mean_difference,
)
from harness.stats.drop_rules import DEFAULT_RULE, DROP_RULES, DropRule, drop_fails
from harness.stats.equivalence import (
    EquivalenceResult,
    equivalence_test,
    equivalence_test_from_stats,
    ratio_margin,
    relative_margin,
)
from harness.stats.max_statistic import MaxStatisticResult, max_statistic_test
from harness.stats.multiple import AdjustedPValues, HolmResult, benjamini_hochberg, holm
from harness.stats.profile import PerformanceProfile, bootstrap_performance_profile, performance_profile
from harness.stats.power import minimum_detectable_difference, power_of, seeds_needed
from harness.stats.proportion import BinomialRate
from harness.stats.rank import (
    MannWhitneyResult,
    PermutationResult,
    mann_whitney,
    mann_whitney_censored,
    permutation_test_means,
)
from harness.stats.resolution import (
    minimum_seeds,
    rounding_tolerance,
    smallest_pvalue_permutation,
    smallest_pvalue_rank,
)
from harness.stats.sequential import (
    DECISIONS,
    SequentialLook,
    SequentialResult,
    sequential_look,
    sequential_test,
)
from harness.stats.sequential_design import SequentialPlan, sequential_plan
from harness.stats.welch import WelchResult, welch_test, welch_test_from_stats

__all__ = [
    "ALTERNATIVES",
    "BOOTSTRAP_METHODS",
    "BOUNDARY_KINDS",
    "DECISIONS",
    "DEFAULT_RULE",
    "DROP_RULES",
    "AdjustedPValues",
    "BinomialRate",
    "Alternative",
    "BootstrapResult",
    "ConfidenceInterval",
    "DropRule",
    "EquivalenceResult",
    "HolmResult",
    "MannWhitneyResult",
    "MaxStatisticResult",
    "PerformanceProfile",
    "PermutationResult",
    "SequentialBoundaries",
    "SequentialLook",
    "SequentialPlan",
    "SequentialResult",
    "WelchResult",
    "benjamini_hochberg",
    "bootstrap_ci",
    "bootstrap_iqm",
    "bootstrap_mean",
    "bootstrap_mean_difference",
    "bootstrap_performance_profile",
    "bootstrap_probability_of_improvement",
    "bootstrap_task_mean",
    "drop_fails",
    "equivalence_test",
    "equivalence_test_from_stats",
    "exit_probabilities",
    "holm",
    "iqm",
    "mann_whitney",
    "mann_whitney_censored",
    "max_statistic_test",
    "minimum_detectable_difference",
    "performance_profile",
    "minimum_seeds",
    "permutation_test_means",
    "power_of",
    "probability_of_improvement",
    "ratio_margin",
    "relative_margin",
    "rounding_tolerance",
    "seeds_needed",
    "sequential_boundaries",
    "sequential_look",
    "sequential_plan",
    "sequential_test",
    "spending_function",
    "task_mean",
    "smallest_pvalue_permutation",
    "smallest_pvalue_rank",
    "welch_test",
    "welch_test_from_stats",
]

"""Sites with uncertain dates: time blocks, aoristic weights, Monte Carlo dating, density maps.

``date_ranges`` reads each site's range ``[start, end)`` from its years or a
dating category; ``time_blocks`` lays blocks of one width over a span;
``aoristic_weights`` spreads each site over the blocks (Ratcliffe 2000), with a
uniform or trapezoid date density (:class:`DateDensity`); ``monte_carlo`` and
``block_table`` simulate dates within the ranges (Crema 2012) and summarise
counts, changes and a uniform-through-time null; ``kernel_density`` maps the
sites of a block; ``window_probabilities`` gives each site its probability of
belonging to a named time window (sample weights for period models);
``fit_window_models`` cross-validates every learner per window on the same
folds and compares consecutive windows (continuity); ``run_periods`` is the
``mlsites periods`` command, and ``periods_in_run`` the periods stage of a run.
"""

from mlsites.periods._aoristic import (
    DENSITIES,
    MAX_BLOCKS,
    DateDensity,
    TimeBlocks,
    aoristic_sum,
    aoristic_weights,
    sparse_weights,
    time_blocks,
)
from mlsites.periods._dates import DateRanges, date_ranges
from mlsites.periods._density import kernel_density, scott_bandwidth, write_densities
from mlsites.periods._montecarlo import (
    NULL_MODEL,
    MonteCarloCounts,
    block_table,
    monte_carlo,
    simulate_block_counts,
    simulate_null_counts,
)
from mlsites.periods._models import (
    WindowModels,
    fit_window_models,
    window_table,
    window_weights,
    write_window_models,
)
from mlsites.periods._run import (
    DatedSites,
    PeriodsResult,
    check_dated_sites,
    has_dates,
    read_dated_sites,
    write_periods,
    blocks_for_experiment,
    dates_for_experiment,
    density_from_settings,
    run_periods,
    windows_for_experiment,
)
from mlsites.periods._windows import WindowWeights, window_probabilities

__all__ = [
    "DENSITIES",
    "MAX_BLOCKS",
    "DateDensity",
    "TimeBlocks",
    "time_blocks",
    "aoristic_weights",
    "aoristic_sum",
    "sparse_weights",
    "DateRanges",
    "date_ranges",
    "NULL_MODEL",
    "MonteCarloCounts",
    "simulate_block_counts",
    "simulate_null_counts",
    "monte_carlo",
    "block_table",
    "kernel_density",
    "write_densities",
    "scott_bandwidth",
    "WindowWeights",
    "window_probabilities",
    "WindowModels",
    "window_weights",
    "window_table",
    "fit_window_models",
    "write_window_models",
    "DatedSites",
    "read_dated_sites",
    "check_dated_sites",
    "write_periods",
    "has_dates",
    "PeriodsResult",
    "run_periods",
    "density_from_settings",
    "dates_for_experiment",
    "blocks_for_experiment",
    "windows_for_experiment",
]

"""One function per user-level job: read selections from the store, call the core, hand results to the writers.

The command line and the demo call these; scripts and notebooks may too. Split by theme:
store_jobs (import, assignment, statistics, checks), slug_jobs (slug-test reduction), surfaces (heads,
verticals, interpolation, gradients), pathways (particle tracking, contributing areas, drawdown), outputs (maps,
layers, figures, model grids), hydrographs (head and spring discharge against time), head_change
(the change of head per zone between two windows), springflow (spring discharge against head, cease-flow
head, trigger levels, recession, and the spring effect of a drawdown scenario).
"""

from .store_jobs import (  # noqa: F401
    init_store, import_data, zone_assignment, tests_with_units, unit_stats, well_profiles, check_store,
    CAUTION, retire_records, restore_records, record_history, copy_store,
)
from .slug_jobs import reduce_slug_tests, SLUG_METHODS, METHOD_NAMES as SLUG_METHOD_NAMES  # noqa: F401
from .surfaces import (  # noqa: F401
    QUANTITIES, AUTO_GLOBAL_MAX, METHODS, zone_heads, unit_intervals, verticals, surface_points,
    make_interpolator, build_surface, write_gradients, three_point_wells, read_surface,
)
from .pathways import KARST_WARNING, trace_paths, active_pumping, drawdown_scenario  # noqa: F401
from .hydrographs import hydrograph_data, write_hydrographs  # noqa: F401
from .head_change import zone_head_changes  # noqa: F401
from .springflow import springflow, spring_effects, scenario_spring_effects, read_relation  # noqa: F401
from .outputs import (  # noqa: F401
    SPRING_SVG, contour_lines, well_summaries, export_layers, build_map, make_figures, MODEL_MAX_CELLS,
    model_grid,
)

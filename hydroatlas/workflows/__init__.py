"""One function per user-level job: read selections from the store, call the core, hand results to the writers.

The command line and the demo call these; scripts and notebooks may too. Split by theme:
store_jobs (import, assignment, statistics, checks), slug_jobs (slug-test reduction), surfaces (heads,
verticals, interpolation, gradients), pathways (particle tracking, contributing areas, drawdown), outputs (maps,
layers, figures, model grids).
"""

from .store_jobs import (  # noqa: F401
    init_store, import_data, zone_assignment, tests_with_units, unit_stats, well_profiles, check_store,
    CAUTION, retire_records, restore_records, record_history,
)
from .slug_jobs import reduce_slug_tests, SLUG_METHODS, METHOD_NAMES as SLUG_METHOD_NAMES  # noqa: F401
from .surfaces import (  # noqa: F401
    QUANTITIES, AUTO_GLOBAL_MAX, METHODS, zone_heads, unit_intervals, verticals, surface_points,
    make_interpolator, build_surface, write_gradients, three_point_wells, read_surface,
)
from .pathways import KARST_WARNING, trace_paths, active_pumping, drawdown_scenario  # noqa: F401
from .outputs import (  # noqa: F401
    SPRING_SVG, contour_lines, well_summaries, export_layers, build_map, make_figures, MODEL_MAX_CELLS,
    model_grid,
)

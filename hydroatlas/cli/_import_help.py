"""The input columns of each import kind, for ``hydroatlas import --help``.

Generated from the column contract (hydroatlas.store.columns.column_help) so that --help imports no library
module; tests/test_columns.py checks that it equals the generator's output. Renew it with
``python -c "from hydroatlas.cli._import_help import renew; renew()"``.
"""

COLUMNS = 'units: code, name, rank, role, parent?\nwells: well_id, x?, y?, lon?, lat?, longitude?, latitude?, ground_elev, total_depth?, kind?, name?\npicks: well_id, unit, top_depth, bottom_depth\nzones: well_id, zone_id, top_depth, bottom_depth, kind?, unit?\nktests: well_id, zone_id, test_id?, tested_on, method, k, k_unit, quality?, source?, orientation?\nheads: well_id, zone_id, measured_at, head?, depth_to_water?, ref_elev?, quality?\npumping: well_id, zone_id?, rate, rate_unit, start, end?\nsprings: spring_id, x?, y?, lon?, lat?, longitude?, latitude?, elev, name?, unit?\ndischarge: spring_id, measured_at, discharge, rate_unit\nareas: area_id, kind, unit?\nslugtests: well_id, zone_id, test_id, t_s, displacement\nsluggeometry: well_id, zone_id, test_id, casing_radius, well_radius, screen_length, aquifer_thickness?,\n    static_depth?, tested_on?, screen_top_depth?, confined?, geometry_kind?\ntransducer: well_id, zone_id, test_id, timestamp, value, value_unit, test_start?'


def renew() -> None:
    """Rewrite this file from the column contract."""
    from pathlib import Path

    from ..store.columns import column_help

    path = Path(__file__)
    old = path.read_text(encoding="utf-8")
    start = old.index("COLUMNS = ")
    end = old.index("\n\n\ndef renew")
    path.write_text(old[:start] + f"COLUMNS = {column_help()!r}" + old[end:], encoding="utf-8")

"""Files in and out: maps (our text table and bundle, anything orix reads), strain files, tables read
back, notch study files, saved grain graphs and folders of maps. No reader runs code from a file.
"""

from __future__ import annotations

from slipnet.io.folders import (
    map_files,
    read_map_folder,
)
from slipnet.io.graph import (
    GRAPH_FORMAT,
    GRAPH_VERSION,
    read_grain_graph,
    write_grain_graph,
)
from slipnet.io.maps import (
    BUNDLE_SUFFIXES,
    TEXT_SUFFIXES,
    from_orix,
    map_summary,
    parse_frame_rotation,
    read_map,
    to_orix,
    write_map,
)
from slipnet.io.strain import (
    FORMAT_TAG,
    read_strain,
    write_strain,
)
from slipnet.io.study import (
    Study,
    read_study,
)
from slipnet.io.tables import (
    ForecastTables,
    GrowthTables,
    read_control_points,
    read_csv_table,
    read_forecast_folder,
    read_forecast_tables,
    read_growth_folder,
    read_growth_record,
    read_measured_path,
)

__all__ = [
    "BUNDLE_SUFFIXES",
    "FORMAT_TAG",
    "GRAPH_FORMAT",
    "GRAPH_VERSION",
    "TEXT_SUFFIXES",
    "ForecastTables",
    "GrowthTables",
    "Study",
    "from_orix",
    "map_files",
    "map_summary",
    "parse_frame_rotation",
    "read_control_points",
    "read_csv_table",
    "read_forecast_folder",
    "read_forecast_tables",
    "read_grain_graph",
    "read_growth_folder",
    "read_growth_record",
    "read_map",
    "read_map_folder",
    "read_measured_path",
    "read_strain",
    "read_study",
    "to_orix",
    "write_grain_graph",
    "write_map",
    "write_strain",
]

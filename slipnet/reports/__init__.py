"""Every writer of tables, settings, pictures and summaries, on one shared writer
(:class:`Outputs`); each returns ``{name: Path}`` of the files it wrote.
"""

from __future__ import annotations

from slipnet.reports.compare import (
    write_comparison,
)
from slipnet.reports.cyclic import (
    write_cyclic,
)
from slipnet.reports.forecast import (
    write_forecast,
)
from slipnet.reports.grains import (
    write_grains,
    write_graphml,
)
from slipnet.reports.growth import (
    write_growth,
)
from slipnet.reports.notch import (
    write_batch,
    write_plan,
)
from slipnet.reports.slip import (
    write_slip,
)
from slipnet.reports.stress import (
    write_stress,
)
from slipnet.reports.writer import (
    Outputs,
    json_default,
    markdown_table,
    write_json,
    write_summary,
    write_table,
)

__all__ = [
    "Outputs",
    "json_default",
    "markdown_table",
    "write_batch",
    "write_comparison",
    "write_cyclic",
    "write_forecast",
    "write_grains",
    "write_graphml",
    "write_growth",
    "write_json",
    "write_plan",
    "write_slip",
    "write_stress",
    "write_summary",
    "write_table",
]

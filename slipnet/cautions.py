"""The caution every report, README and command-line output carries."""

CAUTION = (
    "Forecasts from slipnet rank likely behaviour from a surface orientation map; they support, "
    "never replace, fatigue testing. Sub-surface grains, residual stress, surface finish and "
    "environment are not in the map. Any structural or safety decision follows the applicable "
    "design codes and licensed engineering practice."
)

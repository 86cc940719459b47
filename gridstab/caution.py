"""The caution that the README, the command-line help and every map carry."""

CAUTION = (
    "Caution: gridstab fields are diagnostics of model output, not forecasts or warnings. "
    "Follow official warnings and local forecasting practice."
)
SHORT_CAUTION = "Diagnostics of model output, not a forecast or warning; follow official warnings."

"""The caution every output of the tool carries."""

CAUTION = (
    "An upscaled model is an engineering approximation of the fine model, which is itself "
    "uncertain. Check coarse results against field data before using them in decisions on "
    "water supply, contamination, underground storage or production. Local regulations and "
    "licensed professionals take precedence over this tool's output."
)

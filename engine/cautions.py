"""Cautions every output carries (one wording, used by the CLI, the app and exports)."""

CAUTION = (
    "Caution: statistical adequacy is not regulatory acceptance. For clinical, environmental or "
    "safety measurements follow your laboratory's validated procedures and the applicable guidance."
)

POST_SEARCH_CAUTION = (
    "p-values after a search are optimistic: every candidate here was tried on the same data, so treat "
    "them as descriptive and confirm the chosen model on an independent run."
)

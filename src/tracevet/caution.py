"""The caution tracevet shows wherever it reports: one wording, one owner.

Imported by the CLI help and reports (``tracevet --help``, ``denoise``,
``assess``), the review app's help screen and the export's sign-off report;
nothing else spells it out.
"""

CAUTION = (
    "tracevet is not a medical device and does not diagnose; its flags support but never "
    "replace review by qualified staff; follow local regulations and institutional protocols."
)

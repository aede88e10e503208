"""One module per sub-command; see :mod:`ecoscan.cli` for the protocol."""

# Order in which commands are listed by ``ecoscan --help``; others follow alphabetically.
ORDER = (
    "demo",
    "survey",
    "detect",
    "analyse",
    "scales",
    "validate",
    "calibrate",
    "compare",
    "change",
    "plan",
)

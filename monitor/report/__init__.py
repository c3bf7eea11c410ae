"""Charts and the HTML report (SPEC §9)."""

"""Charts and the HTML report."""

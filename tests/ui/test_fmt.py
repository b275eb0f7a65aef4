"""Number formats of the app's panes keep their width whatever the value."""

from __future__ import annotations

from blotter.ui import fmt


def test_pct_is_capped_so_a_huge_share_keeps_its_column() -> None:
    # A what-if whose full change is near zero gives an error share in the hundred-thousands.
    assert fmt.pct(106108.3, 8) == "  >+999%"
    assert fmt.pct(-5000.0, 8) == "  >-999%"
    assert fmt.pct(-12.34, 8) == "  -12.3%"
    assert fmt.pct(999.0) == "+999.0%"
    assert fmt.pct(float("nan"), 3) == fmt.MISSING.rjust(3)

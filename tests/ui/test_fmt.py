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


def test_the_move_grid_never_ends_on_a_cut_number() -> None:
    """The Move pane widens its label column so the last column on screen is whole: at every
    width the label plus the whole columns that fit fill it exactly, or everything fits."""
    from blotter.ui.widgets.move_pane import LABEL_WIDTH, VALUE_WIDTHS, fit_label_width

    total = LABEL_WIDTH + sum(VALUE_WIDTHS)
    for width in range(LABEL_WIDTH, total + 20):
        label = fit_label_width(width)
        assert label >= LABEL_WIDTH
        if width >= total:
            assert label == LABEL_WIDTH
            continue
        used, shown = label, 0
        while shown < len(VALUE_WIDTHS) and used + VALUE_WIDTHS[shown] <= width:
            used += VALUE_WIDTHS[shown]
            shown += 1
        assert used == width, (width, label, shown)

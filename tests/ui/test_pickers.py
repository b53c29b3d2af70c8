"""Coordinate pickers with many names: type part of a name, never a silent wrong pick."""

import numpy as np
import pytest
import traitlets

import phaseglass as pg
from phaseglass.ui._base import View
from phaseglass.ui._controls import CoordinatePicker, box_width_px, text_width_px
from phaseglass.ui.divergence_view import DivergenceView

#: 120 names: two scale parameters and 118 sites, as a hierarchical model names them
NAMES = ("mu", "log_tau") + tuple(f"site[{i}]" for i in range(118))


class _Pairs(View):
    """The smallest view with coordinate pickers: a ``coords`` trait over ``names``."""

    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int()).tag(setting=True)

    def __init__(self, names, coords=(0, 5)):
        self.names = tuple(names)
        super().__init__(figsize=(4, 3))
        self.coords = coords
        self._coordinate_pickers(self.names)
        self.children = [self._x_pick, self._y_pick, self._swap_pick, self._status_html]

    def _coordinate_names(self):
        return self.names


@pytest.fixture
def view():
    return _Pairs(NAMES)


def shown(view):
    return view._x_pick.box.value, view._y_pick.box.value


def test_the_pickers_are_type_to_filter_boxes_over_every_name(view):
    assert len(NAMES) == 120
    for pick in (view._x_pick, view._y_pick):
        assert isinstance(pick, CoordinatePicker)
        assert pick.box.options == NAMES  # the browser filters these as the user types
        # the browser never keeps an entry to itself: unknown text reaches Python, which says so
        assert pick.box.ensure_option is False and pick.box.continuous_update is False
    assert shown(view) == ("mu", "site[3]")


def test_typing_part_of_a_name_narrows_the_candidates(view):
    pick = view._x_pick
    ones = pick.matches("site[1")
    # site[1], site[10] .. site[19], site[100] .. site[117], in the target's order
    assert [NAMES[i] for i in ones] == (["site[1]"] + [f"site[{i}]" for i in range(10, 20)]
                                        + [f"site[{i}]" for i in range(100, 118)])
    assert pick.matches("site[17") == [NAMES.index("site[17]")]  # site[170] does not exist
    assert pick.matches("SITE[17") == pick.matches("site[17")  # case does not matter
    assert pick.matches("tau") == [1]
    assert pick.matches("site[1]") == [NAMES.index("site[1]")]  # a whole name is itself alone
    assert len(pick.matches("site")) == 118
    assert pick.matches("") == [] and pick.matches("  ") == [] and pick.matches("zeta") == []


def test_a_designated_name_sets_coords_and_shows_whole(view):
    view._x_pick.box.value = "tau"  # what the browser sends when Enter commits the text
    assert view.coords == (1, 5) and view._x_pick.value == 1
    assert shown(view) == ("log_tau", "site[3]")  # the whole name, not what was typed
    view._y_pick.box.value = "site[17"
    assert view.coords == (1, NAMES.index("site[17]"))
    view._y_pick.box.value = "site[1]"  # a whole name that is also part of others' text
    assert view.coords == (1, NAMES.index("site[1]"))
    assert view.status == ""


@pytest.mark.parametrize("entry, says", [
    ("site[1", "'site[1' is part of 29 names (site[1], site[10], site[11], site[12], site[13], "
               "...); type more of the one you want; y stays site[3]"),
    ("zeta", "no coordinate name contains 'zeta'; y stays site[3]"),
    ("   ", "type part of a coordinate name; y stays site[3]"),
])
def test_an_unknown_or_ambiguous_entry_changes_nothing_and_says_why(view, entry, says):
    view._y_pick.box.value = entry
    assert view.coords == (0, 5) and view._y_pick.value == 5
    assert view.status == f"y: {says}"
    assert shown(view) == ("mu", "site[3]")  # the box shows the coordinate still shown
    view._y_pick.box.value = "site[42"  # a good entry answers the complaint
    assert view.coords == (0, NAMES.index("site[42]")) and view.status == ""


def test_the_same_coordinate_for_x_and_y_is_refused(view):
    view._y_pick.box.value = "mu"
    assert view.coords == (0, 5)
    assert view.status == "x and y must be different coordinates"
    assert shown(view) == ("mu", "site[3]")


def test_coords_set_from_code_show_in_the_pickers(view):
    view.coords = (NAMES.index("site[99]"), 1)
    assert (view._x_pick.value, view._y_pick.value) == (NAMES.index("site[99]"), 1)
    assert shown(view) == ("site[99]", "log_tau")
    view._swap_pick.click()
    assert view.coords == (1, NAMES.index("site[99]"))
    assert shown(view) == ("log_tau", "site[99]")
    with pytest.raises(traitlets.TraitError, match=r"`value` must be in range\(120\)"):
        view._x_pick.value = 120


def test_text_widths_are_at_least_what_matplotlib_lays_out():
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextToPath

    prop = FontProperties(family="DejaVu Sans", size=13)
    for text in ("site[117]", "log_tau", "AVATAR", "effect_of_fertiliser_on_paddock[119]",
                 "\u03c3_\u03b1 \u00d7 mu"):
        # matplotlib's own layout of the string (with kerning) in the same face
        laid_out = TextToPath().get_text_width_height_descent(text, prop, ismath=False)[0]
        assert laid_out - 0.01 <= text_width_px(text) <= 1.1 * laid_out


def test_the_box_holds_the_longest_name_and_two_pickers_fit_the_column():
    width = box_width_px(NAMES)
    # the box: the longest name in DejaVu Sans (wider than notebook fonts), padding, the arrow
    assert width >= text_width_px("site[117]") + 30
    long_names = [f"effect_of_fertiliser_on_paddock[{i}]" for i in range(120)]
    wide = box_width_px(long_names)
    assert text_width_px(long_names[-1]) + 30 <= wide <= 330
    # x and y pickers with their labels, next to a 340 px control, within 800 px
    assert 340 + 2 * (wide + 30) <= 1100  # they wrap onto a second row past 800 px
    assert 340 + 2 * (width + 30) <= 800


@pytest.fixture(scope="module")
def wide_run():
    target = pg.Target(lambda x: -0.5 * float(x @ x), lambda x: -x, dim=120, names=NAMES)
    return pg.sample(target, pg.HMC(0.3, 5), n_draws=30, n_chains=2, warmup=0, seed=3)


def test_a_view_on_120_coordinates_picks_by_typing(wide_run):
    view = DivergenceView(wide_run, coords=("mu", "log_tau"))
    view._x_pick.box.value = "site[17"
    assert view.coords == (NAMES.index("site[17]"), 1)
    assert view._ax_pair.get_xlabel() == "site[17]"
    np.testing.assert_allclose(view._pair.points.get_xdata(),
                               wide_run.draws[:, :, NAMES.index("site[17]")].ravel())
    view._x_pick.box.value = "site[1"
    assert view.coords == (NAMES.index("site[17]"), 1) and "29 names" in view.status

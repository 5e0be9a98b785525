"""The shared did-you-mean rule (lagfield.typos)."""

from lagfield.typos import edit_distance, nearest


def test_swap_of_neighbours_is_one_edit():
    assert edit_distance("dip", "dpi") == 1
    assert edit_distance("nromal", "normal") == 1


def test_hint_needs_most_of_the_word_kept():
    assert nearest("dip", ["dpi", "max_curves"]) == "dpi"
    assert nearest("far", ["near"]) is None  # two edits in three letters: no hint
    assert nearest("resistence", ["capacitance", "resistance"]) == "resistance"
    assert nearest("Sensr", ["sensor"]) == "sensor"  # case does not count

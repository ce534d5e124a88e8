

def test_possessive_takes_the_apostrophe_alone_for_plurals_and_species():
    # Chicago Manual of Style, 17th ed., 7.17-7.19: 's for singular nouns (ending in s too);
    # the apostrophe alone for plurals and nouns the same in both numbers
    from scaling.render.wording import possessive
    words = ("group", "stock", "species", "Species", "plots", "genus", "class", "series")
    assert [possessive(w) for w in words] == [
        "group's", "stock's", "species'", "Species'", "plots'", "genus's", "class's", "series'"]

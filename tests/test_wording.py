

def test_possessive_of_a_noun_ending_in_s_takes_only_the_apostrophe():
    # common practice, no source: English possessive of a noun ending in s
    from scaling.render.wording import possessive
    assert [possessive(w) for w in ("group", "stock", "species", "plots")] == [
        "group's", "stock's", "species'", "plots'"]

"""The Answer of a run: the first sentences of every output.

:func:`headline_of` picks the road's Answer -- several predictors
(:mod:`scaling.render.answer_several`), one predictor
(:func:`scaling.render.headline.build_headline`, with an inverse run's predicting
line from :mod:`scaling.render.prediction_words`), and with a tree the
phylogenetic result leading (:mod:`scaling.render.answer_phylo`) -- then adds the
prediction a user asked for and the row that moves the Answer, if any.  It sits
above those modules so that none of them imports another's Answer.
"""

from __future__ import annotations

from dataclasses import replace

from .answer_phylo import answer_points, phylo_answer
from .answer_several import several_headline
from .headline import Headline, _moves_sentence, build_headline
from .prediction_words import answer_primary

__all__ = ["headline_of"]


_ANSWER_LINES = ("Predicted ", "Inverse prediction of ", "Total over ")


def headline_of(result) -> Headline:
    """:func:`build_headline` for a :class:`scaling.run.pipeline.RunResult`.

    When the headline has room (fewer than three sentences) and the run made a
    few predictions (a fossil's mass, a plot's total biomass), the prediction
    sentence of the run becomes the last sentence: for those users it is the
    answer.
    """
    cfg = result.config
    tables = result.tables or {}
    if getattr(result, "multi_fit", None) is not None:   # several predictors: their own Answer
        head = several_headline(result.fits, result.slope_tests, tables.get("group_tests"),
                                confidence=cfg.model.confidence,
                                group_word=str(cfg.data.group or "group"),
                                diagnostics=tables.get("diagnostics"))
    else:
        head = build_headline(result.fits, result.slope_tests, tables.get("group_tests"),
                              tables.get("pairwise_tests"), methods=cfg.model.methods,
                              primary=answer_primary(cfg),   # an inverse run: its predicting line
                              confidence=cfg.model.confidence,
                              group_word=str(cfg.data.group or "group"))
        head = phylo_answer(head, result)   # with a tree the phylogenetic result leads
    if len(head.sentences) < 3:
        answer = next((m.strip() for prefix in _ANSWER_LINES for m in result.messages
                       if m.strip().startswith(prefix)), None)
        if answer:
            head = replace(head, sentences=tuple(head.sentences) + (answer,))
    moves = _moves_sentence(answer_points(tables.get("points_to_check"), result))
    if moves:   # a row that moves the answer is said in the answer, whatever its length
        head = replace(head, sentences=tuple(head.sentences) + (moves,))
    return head

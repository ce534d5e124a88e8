"""The report's building blocks, shared by the one-predictor report
(:mod:`scaling.render.report`) and the several-predictor one
(:mod:`scaling.render.report_several`): :class:`Block` and :class:`Section`, the
Answer section, the manifest section and the bounds that keep a report of
10 000 groups readable.  Escaping and rounding happen later, in the renderers of
:mod:`scaling.render.report`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
import yaml

from ..stats.schema import method_label
from .wording import clean_timestamp, slope_interval_text

__all__ = ["Block", "Section", "TABLE_MAX_ROWS", "ITEMS_MAX"]


@dataclass(frozen=True, slots=True, kw_only=True)
class Block:
    """One piece of a section.

    ``kind`` is ``p`` (text), ``ul`` (items), ``table`` (frame), ``img``
    (png bytes with ``text`` as caption and ``path`` the written file),
    ``pre`` (text), ``links`` (items are relative paths), ``caution`` (text),
    ``details`` (items shown folded, ``text`` the summary line).
    ``highlight`` is a boolean per table row (e.g. extrapolated predictions).
    ``csv``: the file(s) holding every row of a table whose ``name`` is a caption, not
    a file name (default: ``{name}.csv``).
    """

    kind: str
    text: str = ""
    items: tuple = ()
    frame: pd.DataFrame | None = None
    png: bytes = b""
    path: str = ""
    highlight: tuple = ()
    name: str = ""
    csv: str = ""

    @property
    def full_rows(self) -> str:
        """Where every row of this table is: ``csv``, else the CSV named after it."""
        return self.csv or f"{self.name or 'the'}.csv"


@dataclass(frozen=True, slots=True, kw_only=True)
class Section:
    """A titled part of the report."""

    title: str
    blocks: list = field(default_factory=list)
    anchor: str = ""


def _num(v: float, digits: int = 3) -> str:
    """A number in a sentence (3 significant digits, no e-notation in ordinary ranges)."""
    if not (isinstance(v, (int, float, np.floating)) and math.isfinite(float(v))):
        return "n/a"
    v = float(v)
    if v == 0:
        return "0"
    k = math.floor(math.log10(abs(v)))
    if k >= 9 or k < -4:
        return f"{v:.{digits - 1}e}"
    decimals = max(digits - 1 - k, 0)
    return f"{v:.{decimals}f}"


def _interval_text(lo, hi, gap_low=np.nan, gap_high=np.nan) -> str:
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return "unbounded" if np.isfinite(lo) or np.isfinite(hi) else "–"
    if np.isfinite(gap_low) and np.isfinite(gap_high):
        return slope_interval_text(lo, hi, gap_low, gap_high, fmt=lambda v: _num(float(v), 4))
    return f"{_num(float(lo), 4)} to {_num(float(hi), 4)}"


def _summary_section(messages: tuple, warnings) -> Section:
    """The run's findings as a list, then its points to check."""
    blocks = [Block(kind="ul", items=tuple(messages))] if messages else []
    if warnings:
        blocks.append(Block(kind="p", text="Points to check:"))
        blocks.append(Block(kind="ul", items=tuple(warnings)))
    return Section(title="Summary", blocks=blocks, anchor="summary")


def _headline_section(head) -> Section:
    """The answer first: at most three sentences, then the per-group verdicts."""
    blocks = [Block(kind="p", text=" ".join(head.sentences))]
    if head.group_table is not None and len(head.group_table):
        blocks.append(Block(kind="table", frame=head.group_table,
                            name=f"{method_label(head.primary)} exponent of each group",
                            csv="fits.csv (exponents) and slope_tests.csv (tests)"))
    return Section(title="Answer", blocks=blocks, anchor="answer")


#: Tables longer than this show their first rows and a note (the CSV has every row).
TABLE_MAX_ROWS = 60
#: Folded lists (e.g. per-group test sentences) longer than this are cut likewise.
ITEMS_MAX = 200


def _bounded(sections: list) -> list:
    """Cut long tables and folded lists so the report stays bounded with 10 000 groups.

    Only the rows shown are ever formatted; the full tables are the CSV files.
    """
    out = []
    for section in sections:
        blocks = []
        for b in section.blocks:
            if b.kind == "table" and b.frame is not None and len(b.frame) > TABLE_MAX_ROWS:
                blocks.append(replace(b, frame=b.frame.head(TABLE_MAX_ROWS),
                                   highlight=tuple(b.highlight[:TABLE_MAX_ROWS])))
                blocks.append(Block(kind="p", text=(
                    f"First {TABLE_MAX_ROWS} of {len(b.frame):,} rows shown; every row is in "
                    f"{b.full_rows}.")))
            elif b.kind == "details" and len(b.items) > ITEMS_MAX:
                blocks.append(replace(b, items=tuple(b.items[:ITEMS_MAX]) + (
                    f"... {len(b.items) - ITEMS_MAX:,} more; see slope_tests.csv.",)))
            else:
                blocks.append(b)
        out.append(replace(section, blocks=blocks))
    return out


def _manifest_section(result) -> Section:
    man = result.manifest or {}
    blocks = []
    facts = []
    for key, label in (("created_utc", "Created (UTC)"), ("scaling_version", "scaling"),
                       ("config_file", "Config file"), ("input_file", "Input file"),
                       ("input_sha256", "Input SHA-256")):
        if man.get(key):
            value = clean_timestamp(man[key]) if key == "created_utc" else man[key]
            facts.append(f"{label}: {value}")
    if facts:
        blocks.append(Block(kind="ul", items=tuple(facts)))
    versions = man.get("versions") or {}
    if versions:
        blocks.append(Block(kind="table", name="versions", frame=pd.DataFrame(
            {"package": list(versions), "version": [str(v) for v in versions.values()]})))
    config = man.get("config")
    if config is None and getattr(result.config, "raw", None):
        config = result.config.raw
    if config:
        text = yaml.safe_dump(config, sort_keys=False, allow_unicode=True,
                              default_flow_style=False)
        blocks.append(Block(kind="p", text="Configuration as read:"))
        blocks.append(Block(kind="pre", text=text))
    return Section(title="Manifest", blocks=blocks, anchor="manifest")

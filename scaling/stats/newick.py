"""A small, fast, iterative Newick reader returning flat arrays.

The tree comes back as a :class:`Tree`: a parent index per node, in
pre-order (every parent has a smaller index than its children), a branch
length per node and a name per node.  That is exactly the layout the
linear-time likelihood of :mod:`scaling.stats.phylogeny` needs, so no object tree is
ever built.

Why our own reader
------------------
The maintained registry readers were timed on a random 100 000-tip tree
(``benchmarks/bench_phylo.py`` prints the comparison): treeswift
(``read_tree_newick``), dendropy (``Tree.get``) and the ``newick`` package
(``newick.loads``).  treeswift is fast enough for the speed target, but
none of the three reports *where* a tree is broken (the character offset
of a missing or negative branch length, or of the token that cannot be
parsed), which we require of every bad-tree error; all three also
return object trees that must then be walked node by node in Python to
get the arrays.  This reader is a single regular-expression tokeniser and
one loop over tokens, keeps the offset of every node, and is as fast as
treeswift plus that conversion.  The registry readers are still used, in
the tests, as independent references (dendropy builds the covariance
matrix the PGLS test compares against).

Grammar accepted (the Newick standard as written by common tree software):
nested parentheses, commas, optional labels (unquoted, with ``_`` read as
a space later by the tip matcher, or single-quoted with ``''`` for a
quote), ``:length`` after any node, ``[...]`` comments anywhere between
tokens (skipped), whitespace between tokens, and a final ``;``.  The root's
own branch length, if present, is ignored; labels of internal nodes are
kept but not used.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import DataError

__all__ = ["Tree", "parse_newick", "read_newick"]

_TOKEN = re.compile(
    r"\s*(?:(\()|(\))|(,)|(:)|(;)|('(?:[^']|'')*')|(\[[^\]]*\])|([^\s(),:;'\[\]]+))"
)
_OPEN, _CLOSE, _COMMA, _COLON, _SEMI, _QUOTED, _COMMENT, _WORD = range(1, 9)


@dataclass(frozen=True, slots=True, kw_only=True)
class Tree:
    """A rooted tree as flat arrays, nodes in pre-order.

    Attributes
    ----------
    parent : ndarray of int, shape (N,)
        Index of each node's parent; -1 for the root (node 0).  Parents
        precede their children.
    length : ndarray of float, shape (N,)
        Length of the branch above each node (0 for the root).
    names : tuple of str
        Label of each node ("" when absent); tips carry the species names.
    is_tip : ndarray of bool, shape (N,)
    source : str
        Where the tree came from (file name or ``"<string>"``), for messages.
    """

    parent: np.ndarray
    length: np.ndarray
    names: tuple
    is_tip: np.ndarray
    source: str = "<string>"
    offsets: np.ndarray | None = field(default=None, repr=False, compare=False)

    @property
    def n_nodes(self) -> int:
        return int(self.parent.size)

    @property
    def tips(self) -> np.ndarray:
        """Node indices of the tips, in pre-order."""
        return np.flatnonzero(self.is_tip)

    @property
    def tip_names(self) -> tuple:
        return tuple(self.names[i] for i in self.tips)

    @property
    def n_tips(self) -> int:
        return int(np.count_nonzero(self.is_tip))


def _unquote(text: str) -> str:
    return text[1:-1].replace("''", "'")


def parse_newick(text: str, *, source: str = "<string>", first_only: bool = False) -> Tree:
    """Parse one Newick tree.

    Parameters
    ----------
    text : str
        The Newick string (one tree ending in ``;``).
    source : str
        Name used in error messages (e.g. the file path).
    first_only : bool
        Stop after the first tree's ';' (a file of several trees); otherwise
        text after it is an error.

    Returns
    -------
    Tree

    Raises
    ------
    DataError
        If the text cannot be parsed, a branch length is missing or is not a
        number, or a length is negative; the message gives the character
        offset (0-based) in ``source``.

    Notes
    -----
    One pass over the tokens with an explicit stack (no recursion, so deep
    caterpillar trees are fine).  Nodes are numbered in the order their
    text starts, which is pre-order.
    """
    parent: list[int] = []
    length: list = []
    names: list[str] = []
    tip: list[bool] = []
    offset: list[int] = []
    stack: list[int] = []
    prev = -1          # node that a label or length would attach to
    has_label = False  # prev already has a label
    done = False
    pos = 0
    end = len(text)

    def fail(at: int, what: str):
        raise DataError(f"tree {source}: {what} at character {at}")

    def new_node(at: int, is_tip: bool, name: str = "") -> int:
        parent.append(stack[-1] if stack else -1)
        length.append(None)
        names.append(name)
        tip.append(is_tip)
        offset.append(at)
        return len(parent) - 1

    while pos < end:
        m = _TOKEN.match(text, pos)
        if m is None:
            rest = text[pos:].lstrip()
            if not rest:
                break
            fail(end - len(rest), f"cannot read {rest[:10]!r}")
        kind = m.lastindex
        at = m.start(kind)
        pos = m.end()
        if kind == _COMMENT:
            continue
        if done:
            fail(at, "text after the closing ';'")
        if kind == _OPEN:
            if prev != -1:      # also catches a second tree after the root closed
                fail(at, "'(' where ',' or ')' was expected")
            stack.append(new_node(at, False))
            prev, has_label = -1, False
        elif kind == _COMMA or kind == _CLOSE:
            if not stack:
                fail(at, f"unbalanced {m.group(kind)!r}")
            if prev == -1:        # an empty tip such as "(,A)"
                new_node(at, True)
            if kind == _COMMA:
                prev, has_label = -1, False
            else:
                prev, has_label = stack.pop(), False
        elif kind == _QUOTED or kind == _WORD:
            label = _unquote(m.group(kind)) if kind == _QUOTED else m.group(kind)
            if prev == -1:
                prev, has_label = new_node(at, True, label), True
            elif has_label or length[prev] is not None:
                fail(at, f"unexpected label {label!r}")
            else:
                names[prev], has_label = label, True
        elif kind == _COLON:
            if prev == -1:
                prev = new_node(at, True)
            if length[prev] is not None:
                fail(at, "a second branch length")
            m2 = _TOKEN.match(text, pos)
            while m2 is not None and m2.lastindex == _COMMENT:
                pos = m2.end()
                m2 = _TOKEN.match(text, pos)
            if m2 is None or m2.lastindex != _WORD:
                fail(pos, "a branch length is missing after ':'")
            word = m2.group(_WORD)
            try:
                value = float(word)
            except ValueError:
                fail(m2.start(_WORD), f"branch length {word!r} is not a number")
            if not np.isfinite(value):
                fail(m2.start(_WORD), f"branch length {word!r} is not finite")
            if value < 0:
                fail(m2.start(_WORD), f"negative branch length {word}")
            length[prev] = value
            pos = m2.end()
        elif kind == _SEMI:
            if stack:
                fail(at, f"{len(stack)} unclosed '('")
            if not parent:
                fail(at, "empty tree")
            done = True
            if first_only:
                break
    if not done:
        if not parent:
            raise DataError(f"tree {source}: no tree found (empty text)")
        fail(end, "the tree does not end with ';'" if not stack
             else f"{len(stack)} unclosed '(' (the tree does not end with ';')")

    par = np.asarray(parent, dtype=np.intp)
    lens = np.array([np.nan if v is None else v for v in length], dtype=float)
    offs = np.asarray(offset, dtype=np.intp)
    lens[0] = 0.0   # the root's own branch (if any) plays no part
    missing = np.flatnonzero(np.isnan(lens))
    if missing.size:
        i = int(missing[0])
        what = f"tip {names[i]!r}" if tip[i] and names[i] else "a node"
        raise DataError(
            f"tree {source}: no branch length for {what} at character {int(offs[i])} "
            f"({missing.size} branch(es) without a length); the tree needs branch lengths")
    if par.size == 1:
        raise DataError(f"tree {source}: the tree has a single node, no branches")
    return Tree(parent=par, length=lens, names=tuple(names), is_tip=np.asarray(tip, dtype=bool),
                source=source, offsets=offs)


def read_newick(path) -> Tree:
    """Read the first tree of a Newick file (see :func:`parse_newick`; later trees are ignored).

    Raises
    ------
    DataError
        If the file cannot be read or the tree is malformed.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise DataError(f"tree {path}: cannot be read ({exc})") from None
    return parse_newick(text, source=str(path), first_only=True)

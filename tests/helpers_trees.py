"""Trees for the phylogenetic tests (simulations with a known truth) and the dense
Pagel-lambda covariance built another way, from dendropy's patristic distances
(the reference the linear-time pass is checked against)."""

from __future__ import annotations

import numpy as np


def random_newick(names, rng, *, polytomy=0.3):
    """Random rooted tree with polytomies; branch lengths uniform on (0.05, 1), so the
    tips end at different heights (not ultrametric)."""
    def build(part):
        if len(part) == 1:
            return f"{part[0]}:{rng.uniform(0.05, 1):.6f}"
        k = 3 if (len(part) >= 3 and rng.random() < polytomy) else 2
        cuts = np.sort(rng.choice(np.arange(1, len(part)), size=k - 1, replace=False))
        kids = [build(p) for p in np.split(np.asarray(part), cuts)]
        return "(" + ",".join(kids) + f"):{rng.uniform(0.05, 1):.6f}"
    return build(list(names)).rsplit(":", 1)[0] + ";"


def clade_tree(sizes, rng, *, stem=0.5):
    """Monophyletic clades of the given sizes, each a random ultrametric subtree below a
    stem of length ``stem`` from the root; tips at height 1."""
    def build(part, height, h=None):
        if len(part) == 1:
            return f"{part[0]}:{height!r}"
        cut = int(rng.integers(1, len(part)))
        h = height * rng.uniform(0.2, 0.9) if h is None else h
        return "(" + build(part[:cut], h) + "," + build(part[cut:], h) + f"):{height - h!r}"
    names, labels, clades = [], [], []
    for c, size in enumerate(sizes):
        part = [f"c{c}s{i}" for i in range(size)]
        names += part
        labels += [f"clade{c}"] * size
        clades.append(build(part, 1.0, h=1 - stem))
    return "(" + ",".join(clades) + ");", names, np.asarray(labels)


def dendropy_cov(newick, names, lam):
    """Pagel-lambda covariance from dendropy's patristic distances, rows in ``names`` order."""
    import dendropy   # the test extra; callers skip without it
    t = dendropy.Tree.get(data=newick, schema="newick", rooting="force-rooted")
    pdm = t.phylogenetic_distance_matrix()
    leaf = {nd.taxon.label: nd for nd in t.leaf_node_iter()}
    h = np.array([leaf[s].distance_from_root() for s in names])
    d = np.array([[pdm.patristic_distance(leaf[a].taxon, leaf[b].taxon) if a != b else 0.0
                   for b in names] for a in names])
    v = (h[:, None] + h[None, :] - d) / 2
    return lam * v + (1 - lam) * np.diag(np.diag(v))

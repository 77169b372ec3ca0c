"""Reference reading of Newick trees for tests/evolution_reference.rs, by DendroPy.

Input: one argument, the path of a Newick file holding one rooted tree.
Output: {"tips": [labels in file order], "clades": [{"tips": [sorted labels], "length": edge
length or null}], "root_to_tip": {label: distance}}

Read with dendropy.Tree.get(schema="newick", preserve_underscores=True, rooting="force-rooted")
(reference: DendroPy 5, dendropy/dataio/newickreader.py). Clades are the tip sets below every
non-root node, which fix a rooted topology; root-to-tip distances are summed edge lengths.
"""

import json
import sys

import dendropy


def main():
    tree = dendropy.Tree.get(
        path=sys.argv[1],
        schema="newick",
        preserve_underscores=True,
        rooting="force-rooted",
        suppress_internal_node_taxa=True,
        suppress_leaf_node_taxa=False,
    )
    tips = [leaf.taxon.label for leaf in tree.leaf_node_iter()]
    clades = []
    for node in tree.preorder_node_iter():
        if node is tree.seed_node:
            continue
        labels = sorted(leaf.taxon.label for leaf in node.leaf_iter())
        clades.append({"tips": labels, "length": node.edge.length})
    rtt = {}
    for leaf in tree.leaf_node_iter():
        d = 0.0
        node = leaf
        while node.parent_node is not None:
            d += node.edge.length or 0.0
            node = node.parent_node
        rtt[leaf.taxon.label] = d
    print(json.dumps({"tips": tips, "clades": clades, "root_to_tip": rtt}))


if __name__ == "__main__":
    main()

//! A rooted phylogenetic tree with branch lengths: reading and writing Newick, depths, shared
//! times, pruning.
//!
//! **Newick** (the Newick format as described by J. Felsenstein's PHYLIP documentation, from
//! memory): `(A:1,(B:2,C:2)x:0.5)root;`. This reader takes nested parentheses with any number of
//! children (polytomies allowed), tip and internal labels, unquoted or in single quotes (`''`
//! inside quotes is one quote), branch lengths after `:` in any float notation, comments in
//! square brackets anywhere between tokens, and white space and line breaks between tokens. An
//! unquoted underscore stays an underscore (the format's description reads it as a blank; labels
//! here must match specimen ids, which often contain underscores). The file must hold exactly one
//! tree ending in `;`. A node with a single child is merged into it (lengths added). Parsing is
//! iterative, so a deep (caterpillar) tree cannot overflow the stack. Errors give the line and
//! column.
//!
//! Nodes are stored in the order the text opens them (preorder); [`Tree::tips`] lists the tip
//! nodes in the text's left-to-right order, the order of every data matrix in this module.

use nalgebra::DMatrix;
use std::fmt::Write as _;
use std::path::Path;

use super::{EvolutionError, tree_err};

/// One node. `length` is the branch from its parent (the root's is kept but never used).
#[derive(Debug, Clone, PartialEq)]
pub struct Node {
    pub parent: Option<usize>,
    pub children: Vec<usize>,
    pub length: Option<f64>,
    pub label: Option<String>,
}

/// While merging: node, new parent, length and label carried down from merged nodes.
type Pending = (usize, Option<usize>, Option<f64>, Option<String>);

/// A rooted tree (see the module docs).
#[derive(Debug, Clone, PartialEq)]
pub struct Tree {
    nodes: Vec<Node>,
    root: usize,
    tips: Vec<usize>,
}

/// Relative tolerance under which root-to-tip distances count as equal (ultrametric).
pub const ULTRAMETRIC_TOLERANCE: f64 = 1e-6;

impl Tree {
    /// Builds a tree from nodes (each child's `parent` must point back; exactly one root).
    pub fn from_nodes(nodes: Vec<Node>) -> Result<Self, EvolutionError> {
        let roots: Vec<usize> = (0..nodes.len())
            .filter(|&i| nodes[i].parent.is_none())
            .collect();
        let [root] = roots[..] else {
            return Err(tree_err(format!(
                "{} nodes without a parent; a tree has one root",
                roots.len()
            )));
        };
        for (i, n) in nodes.iter().enumerate() {
            for &c in &n.children {
                if nodes.get(c).and_then(|c| c.parent) != Some(i) {
                    return Err(tree_err(format!(
                        "node {c} does not point back to node {i}"
                    )));
                }
            }
        }
        let mut t = Self {
            nodes,
            root,
            tips: Vec::new(),
        };
        t.tips = t
            .preorder()
            .into_iter()
            .filter(|&i| t.nodes[i].children.is_empty())
            .collect();
        Ok(t)
    }

    /// Reads a Newick file.
    pub fn read(path: &Path) -> Result<Self, EvolutionError> {
        let text = std::fs::read_to_string(path).map_err(|e| EvolutionError::Newick {
            source_name: path.display().to_string(),
            line: 0,
            column: 0,
            message: format!("cannot read: {e}"),
        })?;
        Self::parse(&text, &path.display().to_string())
    }

    /// Parses Newick text; `source_name` names it in errors.
    #[allow(
        clippy::too_many_lines,
        reason = "one state machine over the tokens, its cases in order"
    )]
    pub fn parse(text: &str, source_name: &str) -> Result<Self, EvolutionError> {
        let bytes = text.as_bytes();
        let err = |pos: usize, message: String| {
            let before = &text[..pos.min(text.len())];
            let line = before.matches('\n').count() + 1;
            let column = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
            EvolutionError::Newick {
                source_name: source_name.to_owned(),
                line,
                column,
                message,
            }
        };
        let mut pos = 0usize;
        // Skips white space and [comments].
        let skip = |pos: &mut usize| -> Result<(), EvolutionError> {
            loop {
                while *pos < bytes.len() && bytes[*pos].is_ascii_whitespace() {
                    *pos += 1;
                }
                if *pos < bytes.len() && bytes[*pos] == b'[' {
                    let start = *pos;
                    let mut depth = 0usize;
                    loop {
                        match bytes.get(*pos) {
                            None => return Err(err(start, "comment '[' is never closed".into())),
                            Some(b'[') => depth += 1,
                            Some(b']') => {
                                depth -= 1;
                                if depth == 0 {
                                    *pos += 1;
                                    break;
                                }
                            }
                            _ => {}
                        }
                        *pos += 1;
                    }
                } else {
                    return Ok(());
                }
            }
        };
        let mut nodes: Vec<Node> = Vec::new();
        let new_node = |nodes: &mut Vec<Node>, parent: Option<usize>| {
            nodes.push(Node {
                parent,
                children: Vec::new(),
                length: None,
                label: None,
            });
            let id = nodes.len() - 1;
            if let Some(p) = parent {
                nodes[p].children.push(id);
            }
            id
        };
        skip(&mut pos)?;
        if pos >= bytes.len() {
            return Err(err(pos, "no tree: the text is empty".into()));
        }
        // `current`: the node whose label/length may follow; `open`: nodes with an open '('.
        let root = new_node(&mut nodes, None);
        let mut open: Vec<usize> = Vec::new();
        let mut current = root;
        // Expecting the start of a node (after '(' or ',' or at the very beginning).
        let mut at_node_start = true;
        loop {
            skip(&mut pos)?;
            let Some(&b) = bytes.get(pos) else {
                return Err(err(pos, "the tree ends without ';'".into()));
            };
            if at_node_start && b == b'(' {
                open.push(current);
                current = new_node(&mut nodes, Some(current));
                pos += 1;
                continue;
            }
            at_node_start = false;
            match b {
                b',' => {
                    let Some(&parent) = open.last() else {
                        return Err(err(pos, "',' outside parentheses".into()));
                    };
                    current = new_node(&mut nodes, Some(parent));
                    at_node_start = true;
                    pos += 1;
                }
                b')' => {
                    let Some(parent) = open.pop() else {
                        return Err(err(pos, "')' without a matching '('".into()));
                    };
                    current = parent;
                    pos += 1;
                }
                b';' => {
                    if !open.is_empty() {
                        return Err(err(
                            pos,
                            format!("{} '(' not closed before ';'", open.len()),
                        ));
                    }
                    pos += 1;
                    skip(&mut pos)?;
                    if pos < bytes.len() {
                        return Err(err(
                            pos,
                            "text after the tree's ';' (one tree per file)".into(),
                        ));
                    }
                    break;
                }
                b':' => {
                    if nodes[current].length.is_some() {
                        return Err(err(pos, "a second branch length for one node".into()));
                    }
                    pos += 1;
                    skip(&mut pos)?;
                    let start = pos;
                    while pos < bytes.len()
                        && (bytes[pos].is_ascii_alphanumeric() || b"+-.".contains(&bytes[pos]))
                    {
                        pos += 1;
                    }
                    let t = &text[start..pos];
                    let v: f64 = t
                        .parse()
                        .map_err(|_| err(start, format!("branch length '{t}' is not a number")))?;
                    if !v.is_finite() || v < 0.0 {
                        return Err(err(
                            start,
                            format!("branch length {t} must be a finite number ≥ 0"),
                        ));
                    }
                    nodes[current].length = Some(v);
                }
                b'(' => {
                    return Err(err(pos, "'(' after a node: a ',' is missing".into()));
                }
                b']' => return Err(err(pos, "']' without a matching '['".into())),
                _ => {
                    if nodes[current].label.is_some() || nodes[current].length.is_some() {
                        return Err(err(
                            pos,
                            "a second label for one node (a ',' or ')' is missing?)".into(),
                        ));
                    }
                    let label = if b == b'\'' {
                        let start = pos;
                        pos += 1;
                        let mut s = String::new();
                        loop {
                            match text[pos..].chars().next() {
                                None => {
                                    return Err(err(start, "quoted label is never closed".into()));
                                }
                                Some('\'') if bytes.get(pos + 1) == Some(&b'\'') => {
                                    s.push('\'');
                                    pos += 2;
                                }
                                Some('\'') => {
                                    pos += 1;
                                    break;
                                }
                                Some(c) => {
                                    s.push(c);
                                    pos += c.len_utf8();
                                }
                            }
                        }
                        s
                    } else {
                        let start = pos;
                        while let Some(c) = text[pos..].chars().next() {
                            if c.is_whitespace() || "():;,[]'".contains(c) {
                                break;
                            }
                            pos += c.len_utf8();
                        }
                        text[start..pos].to_owned()
                    };
                    nodes[current].label = Some(label);
                }
            }
        }
        let mut tree = Self::from_nodes(nodes).map_err(|e| err(0, e.to_string()))?;
        tree.merge_single_children();
        Ok(tree)
    }

    /// Merges every node with one child into that child (lengths added, the child's label kept,
    /// or the parent's when the child has none) and renumbers in preorder.
    fn merge_single_children(&mut self) {
        let order = self.preorder();
        // For each kept node, its new parent and accumulated length.
        let mut keep = vec![true; self.nodes.len()];
        for &i in &order {
            if self.nodes[i].children.len() == 1 {
                keep[i] = false;
            }
        }
        if keep.iter().all(|&k| k) {
            return;
        }
        let mut new_nodes: Vec<Node> = Vec::with_capacity(self.nodes.len());
        let mut new_id = vec![usize::MAX; self.nodes.len()];
        // Walk preorder, carrying (new parent id, extra length, fallback label) from merged nodes.
        let mut stack: Vec<Pending> = vec![(self.root, None, None, None)];
        while let Some((i, parent, extra, label)) = stack.pop() {
            let node = &self.nodes[i];
            let add = |a: Option<f64>, b: Option<f64>| match (a, b) {
                (Some(x), Some(y)) => Some(x + y),
                (x, None) => x,
                (None, y) => y,
            };
            let length = add(node.length, extra);
            let label = node.label.clone().or(label);
            if keep[i] {
                new_nodes.push(Node {
                    parent,
                    children: Vec::new(),
                    length,
                    label,
                });
                let id = new_nodes.len() - 1;
                new_id[i] = id;
                if let Some(p) = parent {
                    new_nodes[p].children.push(id);
                }
                for &c in node.children.iter().rev() {
                    stack.push((c, Some(id), None, None));
                }
            } else {
                let child = node.children[0];
                // the root's own length is never used: do not carry it into the child
                let carry = if parent.is_none() { None } else { length };
                stack.push((child, parent, carry, label));
            }
        }
        *self = Self::from_nodes(new_nodes).expect("merging keeps a tree");
    }

    /// Writes the tree as Newick (labels quoted where needed, lengths in shortest round-trip
    /// form).
    #[must_use]
    pub fn to_newick(&self) -> String {
        fn label(s: &str) -> String {
            if s.is_empty()
                || s.chars()
                    .any(|c| c.is_whitespace() || "():;,[]'".contains(c))
            {
                format!("'{}'", s.replace('\'', "''"))
            } else {
                s.to_owned()
            }
        }
        let mut out = String::new();
        // iterative: (node, next child index)
        let mut stack = vec![(self.root, 0usize)];
        while let Some((i, next)) = stack.pop() {
            let n = &self.nodes[i];
            if next == 0 && !n.children.is_empty() {
                out.push('(');
            }
            if next < n.children.len() {
                if next > 0 {
                    out.push(',');
                }
                stack.push((i, next + 1));
                stack.push((n.children[next], 0));
                continue;
            }
            if !n.children.is_empty() {
                out.push(')');
            }
            if let Some(l) = &n.label {
                out.push_str(&label(l));
            }
            if let (Some(len), true) = (n.length, n.parent.is_some()) {
                let _ = write!(out, ":{len}");
            }
        }
        out.push_str(";\n");
        out
    }

    /// The nodes, in preorder.
    #[must_use]
    pub fn nodes(&self) -> &[Node] {
        &self.nodes
    }

    #[must_use]
    pub fn root(&self) -> usize {
        self.root
    }

    /// Tip nodes in the text's left-to-right order (the row order of data matrices).
    #[must_use]
    pub fn tips(&self) -> &[usize] {
        &self.tips
    }

    /// Number of tips.
    #[must_use]
    pub fn n_tips(&self) -> usize {
        self.tips.len()
    }

    /// Tip labels in [`Self::tips`] order (`""` for an unlabelled tip).
    #[must_use]
    pub fn tip_labels(&self) -> Vec<&str> {
        self.tips
            .iter()
            .map(|&i| self.nodes[i].label.as_deref().unwrap_or(""))
            .collect()
    }

    /// Nodes in preorder (parents before children), children in text order.
    #[must_use]
    pub fn preorder(&self) -> Vec<usize> {
        let mut out = Vec::with_capacity(self.nodes.len());
        let mut stack = vec![self.root];
        while let Some(i) = stack.pop() {
            out.push(i);
            stack.extend(self.nodes[i].children.iter().rev());
        }
        out
    }

    /// Nodes in postorder (children before parents).
    #[must_use]
    pub fn postorder(&self) -> Vec<usize> {
        let mut p = self.preorder();
        p.reverse();
        p
    }

    /// Internal nodes with more than two children.
    #[must_use]
    pub fn polytomies(&self) -> usize {
        self.nodes.iter().filter(|n| n.children.len() > 2).count()
    }

    /// Checks what the comparative methods need: at least `min_tips` tips, every tip labelled
    /// and labels unique, every branch but the root's with a length.
    pub fn check_for_analysis(&self, min_tips: usize) -> Result<(), EvolutionError> {
        if self.n_tips() < min_tips {
            return Err(tree_err(format!(
                "{} tips; at least {min_tips} are needed",
                self.n_tips()
            )));
        }
        let mut seen = std::collections::HashSet::new();
        for (t, l) in self.tip_labels().iter().enumerate() {
            if l.is_empty() {
                return Err(tree_err(format!(
                    "tip {} (in file order) has no label",
                    t + 1
                )));
            }
            if !seen.insert(*l) {
                return Err(tree_err(format!("tip label '{l}' appears twice")));
            }
        }
        let missing: Vec<String> = self
            .preorder()
            .into_iter()
            .filter(|&i| i != self.root && self.nodes[i].length.is_none())
            .take(4)
            .map(|i| self.describe(i))
            .collect();
        if !missing.is_empty() {
            return Err(tree_err(format!(
                "branches without a length (give every branch ':LENGTH'): {}",
                missing.join("; ")
            )));
        }
        Ok(())
    }

    /// A node in words: a tip's label, or the internal node joining its first and last tips.
    #[must_use]
    pub fn describe(&self, node: usize) -> String {
        let n = &self.nodes[node];
        if n.children.is_empty() {
            return format!("tip '{}'", n.label.as_deref().unwrap_or(""));
        }
        let tips = self.descendant_tips(node);
        let name = |t: usize| self.nodes[t].label.clone().unwrap_or_default();
        match (n.label.as_deref(), tips.first(), tips.last()) {
            (Some(l), _, _) if !l.is_empty() => format!("node '{l}'"),
            (_, Some(&a), Some(&b)) => {
                format!("the node joining '{}' and '{}'", name(a), name(b))
            }
            _ => format!("node {node}"),
        }
    }

    /// Tip nodes under `node` (itself if a tip), in text order.
    #[must_use]
    pub fn descendant_tips(&self, node: usize) -> Vec<usize> {
        let mut out = Vec::new();
        let mut stack = vec![node];
        while let Some(i) = stack.pop() {
            if self.nodes[i].children.is_empty() {
                out.push(i);
            }
            stack.extend(self.nodes[i].children.iter().rev());
        }
        out
    }

    /// Branch lengths by node (the root's and missing ones as 0).
    #[must_use]
    pub fn lengths(&self) -> Vec<f64> {
        self.nodes
            .iter()
            .enumerate()
            .map(|(i, n)| {
                if i == self.root {
                    0.0
                } else {
                    n.length.unwrap_or(0.0)
                }
            })
            .collect()
    }

    /// Distance from the root of every node (by node index).
    #[must_use]
    pub fn depths(&self) -> Vec<f64> {
        let len = self.lengths();
        let mut d = vec![0.0; self.nodes.len()];
        for i in self.preorder() {
            if let Some(p) = self.nodes[i].parent {
                d[i] = d[p] + len[i];
            }
        }
        d
    }

    /// Root-to-tip distances in tip order.
    #[must_use]
    pub fn tip_depths(&self) -> Vec<f64> {
        let d = self.depths();
        self.tips.iter().map(|&t| d[t]).collect()
    }

    /// The largest root-to-tip distance.
    #[must_use]
    pub fn height(&self) -> f64 {
        self.tip_depths().into_iter().fold(0.0, f64::max)
    }

    /// Whether every tip is equally far from the root (within [`ULTRAMETRIC_TOLERANCE`] of the
    /// height).
    #[must_use]
    pub fn is_ultrametric(&self) -> bool {
        let d = self.tip_depths();
        let (lo, hi) = d
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            });
        hi - lo <= ULTRAMETRIC_TOLERANCE * hi.max(f64::MIN_POSITIVE)
    }

    /// The `n × n` matrix of shared root-to-MRCA times of tips (the Brownian-motion covariance
    /// with unit rate), in tip order: `S[i][j]` = depth of the most recent common ancestor.
    #[must_use]
    pub fn shared_times(&self) -> DMatrix<f64> {
        let n = self.n_tips();
        let depth = self.depths();
        let mut tip_index = vec![usize::MAX; self.nodes.len()];
        for (t, &node) in self.tips.iter().enumerate() {
            tip_index[node] = t;
        }
        let mut s = DMatrix::zeros(n, n);
        // below[i]: tip indices under node i; each internal node sets its children's cross pairs
        let mut below: Vec<Vec<usize>> = vec![Vec::new(); self.nodes.len()];
        for i in self.postorder() {
            let node = &self.nodes[i];
            if node.children.is_empty() {
                let t = tip_index[i];
                s[(t, t)] = depth[i];
                below[i].push(t);
                continue;
            }
            let mut acc: Vec<usize> = Vec::new();
            for &c in &node.children {
                let child = std::mem::take(&mut below[c]);
                for &a in &acc {
                    for &b in &child {
                        s[(a, b)] = depth[i];
                        s[(b, a)] = depth[i];
                    }
                }
                acc.extend(child);
            }
            below[i] = acc;
        }
        s
    }

    /// The tree restricted to the tips at `keep` (indices into [`Self::tips`]; at least one):
    /// other tips removed, nodes left with one child merged, rooted at the kept tips' most
    /// recent common ancestor (the branch above it dropped). Tip order follows this tree's.
    pub fn keep_tips(&self, keep: &[usize]) -> Result<Self, EvolutionError> {
        let mut wanted = vec![false; self.nodes.len()];
        for &t in keep {
            let Some(&node) = self.tips.get(t) else {
                return Err(tree_err(format!("tip index {t} out of range")));
            };
            wanted[node] = true;
        }
        if !wanted.iter().any(|&w| w) {
            return Err(tree_err("no tips to keep"));
        }
        // a node is kept when a wanted tip lies under it
        let mut under = wanted.clone();
        for i in self.postorder() {
            if let Some(p) = self.nodes[i].parent
                && under[i]
            {
                under[p] = true;
            }
        }
        let mut new_nodes: Vec<Node> = Vec::new();
        let mut stack: Vec<(usize, Option<usize>)> = vec![(self.root, None)];
        while let Some((i, parent)) = stack.pop() {
            let n = &self.nodes[i];
            new_nodes.push(Node {
                parent,
                children: Vec::new(),
                length: n.length,
                label: n.label.clone(),
            });
            let id = new_nodes.len() - 1;
            if let Some(p) = parent {
                new_nodes[p].children.push(id);
            }
            for &c in n.children.iter().rev() {
                if under[c] {
                    stack.push((c, Some(id)));
                }
            }
        }
        let mut t = Self::from_nodes(new_nodes)?;
        // drop the chain of single-child nodes from the root down to the MRCA
        while t.nodes[t.root].children.len() == 1 {
            let child = t.nodes[t.root].children[0];
            let mut nodes = std::mem::take(&mut t.nodes);
            nodes[child].parent = None;
            nodes[child].length = None;
            let old_root = t.root;
            nodes[old_root].children.clear();
            // remove the old root by remapping indices
            let map: Vec<usize> = (0..nodes.len())
                .map(|i| if i > old_root { i - 1 } else { i })
                .collect();
            nodes.remove(old_root);
            for n in &mut nodes {
                n.parent = n.parent.map(|p| map[p]);
                for c in &mut n.children {
                    *c = map[*c];
                }
            }
            t = Self::from_nodes(nodes)?;
        }
        t.merge_single_children();
        Ok(t)
    }
}

#[cfg(test)]
#[allow(
    clippy::float_cmp,
    reason = "lengths parsed from short decimals are compared exactly"
)]
mod tests {
    use super::*;

    #[test]
    fn parses_labels_lengths_comments_and_polytomies() {
        let t = Tree::parse(
            "[a comment] ((A:1,'B c':2.5e0)x:0.5, C_1:3 ,(D:1,E:1,F:1):2)root;\n",
            "t.nwk",
        )
        .unwrap();
        assert_eq!(t.tip_labels(), ["A", "B c", "C_1", "D", "E", "F"]);
        assert_eq!(t.polytomies(), 2); // the root and (D,E,F)
        assert_eq!(t.tip_depths(), [1.5, 3.0, 3.0, 3.0, 3.0, 3.0]);
        assert!(!t.is_ultrametric());
        let again = Tree::parse(&t.to_newick(), "again").unwrap();
        assert_eq!(again, t);
        // quotes inside quotes
        let q = Tree::parse("('it''s':1,b:1);", "q").unwrap();
        assert_eq!(q.tip_labels(), ["it's", "b"]);
    }

    #[test]
    fn errors_name_the_line_and_column() {
        let cases = [
            ("(A:1,B:2", "without ';'"),
            ("(A:1,B:x);", "not a number"),
            ("(A:1,B:-1);", "≥ 0"),
            ("(A:1,B:1));", "without a matching"),
            ("(A:1,B:1);(C,D);", "one tree per file"),
            ("(A:1 B:1);", "second label"),
            ("", "empty"),
            ("(A:1,[open B:1);", "never closed"),
        ];
        for (text, want) in cases {
            let e = Tree::parse(text, "x.nwk").unwrap_err().to_string();
            assert!(e.starts_with("x.nwk: line 1, column"), "{e}");
            assert!(e.contains(want), "{text}: {e}");
        }
        let e = Tree::parse("(A:1,\n  B:oops);", "y.nwk")
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 2, column 5"), "{e}");
    }

    #[test]
    fn single_children_merge_and_pruning_reroots() {
        // ((A:1):1,B:2) → (A:2,B:2)
        let t = Tree::parse("((A:1)n:1,B:2);", "t").unwrap();
        assert_eq!(t.tip_depths(), [2.0, 2.0]);
        assert_eq!(t.nodes().len(), 3);
        let t = Tree::parse("(((A:1,B:1):1,C:2):3,D:5);", "t").unwrap();
        let s = t.shared_times();
        // A and B share 3 + 1 = 4; A and C share 3; A and D share nothing
        assert_eq!(s[(0, 1)], 4.0);
        assert_eq!(s[(0, 2)], 3.0);
        assert_eq!(s[(0, 3)], 0.0);
        assert_eq!(s[(3, 3)], 5.0);
        let ab_c = t.keep_tips(&[0, 2]).unwrap();
        // rooted at the MRCA of A and C (depth 3): A at 2, C at 2
        assert_eq!(ab_c.tip_labels(), ["A", "C"]);
        assert_eq!(ab_c.tip_depths(), [2.0, 2.0]);
        assert!(t.check_for_analysis(3).is_ok());
        let e = Tree::parse("(A:1,B);", "t").unwrap().check_for_analysis(2);
        assert!(e.unwrap_err().to_string().contains("tip 'B'"));
        let e = Tree::parse("(A:1,A:1);", "t")
            .unwrap()
            .check_for_analysis(2);
        assert!(e.unwrap_err().to_string().contains("twice"));
    }

    #[test]
    fn deep_caterpillar_does_not_overflow() {
        let n = 20_000;
        let mut s = String::new();
        for _ in 0..n - 1 {
            s.push('(');
        }
        s.push_str("t0:1");
        for i in 1..n {
            let _ = write!(s, ",t{i}:1):1");
        }
        s.push(';');
        let t = Tree::parse(&s, "deep").unwrap();
        assert_eq!(t.n_tips(), n);
        assert_eq!(Tree::parse(&t.to_newick(), "again").unwrap().n_tips(), n);
    }
}

//! Minimum s-t cut / maximum flow on a pixel grid by the Boykov–Kolmogorov algorithm
//! (Boykov & Kolmogorov 2004, "An experimental comparison of min-cut/max-flow algorithms for
//! energy minimization in vision", IEEE TPAMI 26(9)): two search trees, grown from the source
//! and the sink, are kept between augmentations; after an augmentation the nodes cut off from
//! their tree (orphans) look for a new parent in the same tree (adoption) before becoming free.
//!
//! Written for grids rather than general graphs, because the graph of a pixel problem is
//! implicit: node `p`'s neighbour in direction `d` is `p + offset[d]`, so no adjacency lists
//! are stored. Everything lives in flat arrays allocated once — residual capacity per
//! (node, direction), one signed terminal capacity per node (`> 0`: residual from the source,
//! `< 0`: to the sink), and the trees' parent direction, membership, timestamp and distance
//! per node. The grid is padded with a one-pixel frame of dead nodes (all capacities 0), so the
//! inner loops need no bounds checks. Directions are paired so that `d ^ 1` is the reverse of
//! `d`. A [`GridMaxFlow`] can be [`reset`](GridMaxFlow::reset) and refilled without
//! allocating, which alpha-expansion does once per move.
//!
//! Capacities are `i32` and the flow is summed in `i64`: with integer capacities the result is
//! exact (the max-flow equals the min-cut, checked against PyMaxflow on random grids in
//! `tests/smooth_reference.rs`).

use std::collections::VecDeque;

use rayon::prelude::*;

use super::energy::Connectivity;

/// A residual or terminal capacity.
pub type Capacity = i32;

/// Direction indices: east, west, south, north, south-east, north-west, south-west, north-east.
/// `d ^ 1` reverses `d`; the first four are the 4-neighbourhood.
pub const DIRECTIONS: [(isize, isize); 8] = [
    (1, 0),
    (-1, 0),
    (0, 1),
    (0, -1),
    (1, 1),
    (-1, -1),
    (-1, 1),
    (1, -1),
];

const TERMINAL: u8 = 8;
const ORPHAN: u8 = 9;
const NO_PARENT: u8 = 10;

const FREE: u8 = 0;
const SOURCE: u8 = 1;
const SINK: u8 = 2;

const INFINITE_DIST: u32 = u32::MAX;

/// How a run starts: the variants measured against each other in `benches/smooth_vs_gco.rs`
/// (README, "Smoothing speed"); the results are the same, only the time differs.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum FlowStart {
    /// Plain Boykov–Kolmogorov: trees grown from every node with terminal capacity.
    #[default]
    Trees,
    /// First one sweep saturating the paths source → p → q → sink through single arcs
    /// (a greedy pre-augmentation, common practice in grid max-flow codes), then the trees
    /// on what is left: on expansion graphs most terminal capacity cancels between
    /// neighbours, so fewer nodes start as tree roots.
    ShortPaths,
}

/// Which side of the minimum cut a pixel ended on.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Segment {
    Source,
    Sink,
}

/// A grid graph with its max-flow state.
#[derive(Clone)]
pub struct GridMaxFlow {
    width: usize,
    height: usize,
    /// Padded width.
    pw: usize,
    k: usize,
    offsets: [isize; 8],
    /// `rcap[node * k + d]`: residual capacity of the arc from `node` to `node + offsets[d]`.
    rcap: Vec<Capacity>,
    /// Residual terminal capacity: `> 0` from the source, `< 0` to the sink.
    tcap: Vec<Capacity>,
    parent: Vec<u8>,
    tree: Vec<u8>,
    timestamp: Vec<u32>,
    dist: Vec<u32>,
    queued: Vec<bool>,
    active: VecDeque<u32>,
    orphans: VecDeque<u32>,
    time: u32,
    flow: i64,
    /// The nodes of the last [`max_flow_on`](Self::max_flow_on), the only ones that can be in
    /// a tree unless `trees_everywhere` (after [`max_flow`](Self::max_flow)).
    last_nodes: Vec<u32>,
    trees_everywhere: bool,
}

impl GridMaxFlow {
    /// An empty graph (all capacities 0) on a `width × height` grid.
    pub fn new(width: usize, height: usize, connectivity: Connectivity) -> Self {
        let pw = width + 2;
        let n = pw * (height + 2);
        let k = match connectivity {
            Connectivity::Four => 4,
            Connectivity::Eight => 8,
        };
        let mut offsets = [0isize; 8];
        for (o, &(dx, dy)) in offsets.iter_mut().zip(&DIRECTIONS) {
            *o = dy * pw as isize + dx;
        }
        GridMaxFlow {
            width,
            height,
            pw,
            k,
            offsets,
            rcap: vec![0; n * k],
            tcap: vec![0; n],
            parent: vec![NO_PARENT; n],
            tree: vec![FREE; n],
            timestamp: vec![0; n],
            dist: vec![0; n],
            queued: vec![false; n],
            active: VecDeque::new(),
            orphans: VecDeque::new(),
            time: 0,
            flow: 0,
            last_nodes: Vec::new(),
            trees_everywhere: false,
        }
    }

    pub fn width(&self) -> usize {
        self.width
    }

    pub fn height(&self) -> usize {
        self.height
    }

    /// Directions per node (4 or 8).
    pub fn directions(&self) -> usize {
        self.k
    }

    /// Back to an empty graph, keeping the allocations.
    pub fn reset(&mut self) {
        self.rcap.fill(0);
        self.tcap.fill(0);
        self.flow = 0;
    }

    #[inline]
    fn node(&self, x: usize, y: usize) -> usize {
        (y + 1) * self.pw + x + 1
    }

    /// The node index of pixel `(x, y)` for the `*_node` methods (row-major with padding).
    #[inline]
    pub fn node_of(&self, x: usize, y: usize) -> usize {
        debug_assert!(x < self.width && y < self.height);
        self.node(x, y)
    }

    /// Adds capacities `source` (cut when the pixel ends on the sink side) and `sink` (cut when
    /// it ends on the source side) between pixel `(x, y)` and the terminals.
    pub fn add_terminal(&mut self, x: usize, y: usize, source: Capacity, sink: Capacity) {
        let i = self.node(x, y);
        self.add_terminal_node(i, source, sink);
    }

    /// [`add_terminal`](Self::add_terminal) by node index.
    #[inline]
    pub fn add_terminal_node(&mut self, i: usize, source: Capacity, sink: Capacity) {
        // Only the difference needs a path: min(source, sink) is paid by every cut.
        let (mut s, mut t) = (source, sink);
        if self.tcap[i] > 0 {
            s += self.tcap[i];
        } else {
            t -= self.tcap[i];
        }
        self.flow += s.min(t) as i64;
        self.tcap[i] = s - t;
    }

    /// Adds an edge between pixel `(x, y)` and its neighbour in direction `d` (an index into
    /// [`DIRECTIONS`]) with capacity `forward` towards the neighbour and `backward` from it.
    /// Panics if the neighbour is outside the grid or `d` is not used by the connectivity.
    pub fn add_edge(
        &mut self,
        x: usize,
        y: usize,
        d: usize,
        forward: Capacity,
        backward: Capacity,
    ) {
        assert!(d < self.k, "direction {d} not in this grid's neighbourhood");
        let (dx, dy) = DIRECTIONS[d];
        let (nx, ny) = (x as isize + dx, y as isize + dy);
        assert!(
            nx >= 0 && ny >= 0 && (nx as usize) < self.width && (ny as usize) < self.height,
            "edge leaves the grid"
        );
        let i = self.node(x, y);
        self.add_edge_node(i, d, forward, backward);
    }

    /// [`add_edge`](Self::add_edge) by node index, without the bounds check: the neighbour
    /// must be a pixel of the grid.
    #[inline]
    pub fn add_edge_node(&mut self, i: usize, d: usize, forward: Capacity, backward: Capacity) {
        let j = (i as isize + self.offsets[d]) as usize;
        self.rcap[i * self.k + d] += forward;
        self.rcap[j * self.k + (d ^ 1)] += backward;
    }

    /// The flow found by the last [`max_flow`](Self::max_flow) (including the terminal
    /// capacity every cut pays).
    pub fn flow(&self) -> i64 {
        self.flow
    }

    /// Which side of the minimum cut pixel `(x, y)` is on. Pixels reachable from neither
    /// terminal could go either way; they are reported on the source side.
    pub fn segment(&self, x: usize, y: usize) -> Segment {
        self.segment_node(self.node(x, y))
    }

    #[inline]
    pub fn segment_node(&self, i: usize) -> Segment {
        if self.tree[i] == SINK {
            Segment::Sink
        } else {
            Segment::Source
        }
    }

    fn set_active(&mut self, i: usize) {
        if !self.queued[i] {
            self.queued[i] = true;
            self.active.push_back(i as u32);
        }
    }

    fn next_active(&mut self) -> Option<usize> {
        while let Some(i) = self.active.pop_front() {
            let i = i as usize;
            self.queued[i] = false;
            if self.parent[i] != NO_PARENT {
                return Some(i);
            }
        }
        None
    }

    /// Computes the maximum flow; afterwards [`segment`](Self::segment) gives a minimum cut.
    pub fn max_flow(&mut self) -> i64 {
        self.start_run();
        for i in 0..self.tcap.len() {
            self.init_node(i);
        }
        self.trees_everywhere = true;
        self.run()
    }

    /// [`max_flow`](Self::max_flow) when only `nodes` (node indices from
    /// [`node_of`](Self::node_of), ascending) carry capacity: every other node must have none
    /// in or out. Alpha-expansion leaves most pixels out of each move's cut, and this skips
    /// them: the set-up costs O(`nodes`) instead of O(grid), and the cut is the same as
    /// `max_flow`'s.
    pub fn max_flow_on(&mut self, nodes: &[u32]) -> i64 {
        self.max_flow_on_from(nodes, FlowStart::Trees)
    }

    /// [`max_flow_on`](Self::max_flow_on) with the start `start`.
    pub fn max_flow_on_from(&mut self, nodes: &[u32], start: FlowStart) -> i64 {
        self.start_run();
        if start == FlowStart::ShortPaths {
            self.push_short_paths(nodes);
        }
        // Only the nodes of the last run can still be in a tree.
        if self.trees_everywhere {
            self.tree.fill(FREE);
            self.parent.fill(NO_PARENT);
            self.trees_everywhere = false;
        } else {
            for &i in &self.last_nodes {
                self.tree[i as usize] = FREE;
                self.parent[i as usize] = NO_PARENT;
            }
        }
        debug_assert!(nodes.windows(2).all(|p| p[0] < p[1]), "nodes ascending");
        for &i in nodes {
            self.init_node(i as usize);
        }
        self.last_nodes.clear();
        self.last_nodes.extend_from_slice(nodes);
        self.run()
    }

    /// Lets `fill(y, rcap, tcap)` write the capacities of pixel row `y`, rows in parallel:
    /// `rcap[x * k + d]` is the arc from pixel `(x, y)` to its neighbour in direction `d`
    /// ([`DIRECTIONS`], `k` = [`directions`](Self::directions)), `tcap[x]` its terminal
    /// capacity, `> 0` from the source and `< 0` to the sink (no constant part: the
    /// [`flow`](Self::flow) starts at 0). Entries `fill` does not write keep their values, and
    /// arcs leaving the grid must stay 0.
    pub fn fill_rows<F>(&mut self, fill: F)
    where
        F: Fn(usize, &mut [Capacity], &mut [Capacity]) + Sync,
    {
        let (w, pw, k) = (self.width, self.pw, self.k);
        self.flow = 0;
        self.rcap
            .par_chunks_mut(pw * k)
            .zip(self.tcap.par_chunks_mut(pw))
            .skip(1)
            .take(self.height)
            .enumerate()
            .for_each(|(y, (rcap, tcap))| fill(y, &mut rcap[k..(w + 1) * k], &mut tcap[1..w + 1]));
    }

    /// Saturates, greedily in node order, the paths source → i → j → sink over one arc.
    fn push_short_paths(&mut self, nodes: &[u32]) {
        let k = self.k;
        for &i in nodes {
            let i = i as usize;
            if self.tcap[i] <= 0 {
                continue;
            }
            for d in 0..k {
                let arc = self.rcap[i * k + d];
                if arc == 0 {
                    continue;
                }
                let j = (i as isize + self.offsets[d]) as usize;
                if self.tcap[j] >= 0 {
                    continue;
                }
                let b = arc.min(self.tcap[i]).min(-self.tcap[j]);
                self.rcap[i * k + d] -= b;
                self.rcap[j * k + (d ^ 1)] += b;
                self.tcap[i] -= b;
                self.tcap[j] += b;
                self.flow += b as i64;
                if self.tcap[i] == 0 {
                    break;
                }
            }
        }
    }

    fn start_run(&mut self) {
        for i in self.active.drain(..) {
            self.queued[i as usize] = false;
        }
        self.orphans.clear();
        self.time = 0;
    }

    /// Puts node `i` in the tree of its terminal capacity (or none) at the start of a run.
    #[inline]
    fn init_node(&mut self, i: usize) {
        let t = self.tcap[i];
        self.timestamp[i] = 0;
        if t != 0 {
            self.tree[i] = if t > 0 { SOURCE } else { SINK };
            self.parent[i] = TERMINAL;
            self.dist[i] = 1;
            self.set_active(i);
        } else {
            self.tree[i] = FREE;
            self.parent[i] = NO_PARENT;
        }
    }

    /// The growth – augmentation – adoption loop, from the trees set up by `init_node`.
    fn run(&mut self) -> i64 {
        let k = self.k;
        let mut current: Option<usize> = None;
        loop {
            let i = match current {
                Some(i) if self.parent[i] != NO_PARENT => i,
                _ => match self.next_active() {
                    Some(i) => i,
                    None => break,
                },
            };
            // Growth: look for a neighbour in the other tree; adopt free neighbours.
            let mut join: Option<(usize, usize)> = None; // (node in S, direction to node in T)
            if self.tree[i] == SOURCE {
                for d in 0..k {
                    if self.rcap[i * k + d] == 0 {
                        continue;
                    }
                    let j = (i as isize + self.offsets[d]) as usize;
                    match self.tree[j] {
                        FREE => {
                            self.tree[j] = SOURCE;
                            self.parent[j] = (d ^ 1) as u8;
                            self.timestamp[j] = self.timestamp[i];
                            self.dist[j] = self.dist[i] + 1;
                            self.set_active(j);
                        }
                        SINK => {
                            join = Some((i, d));
                            break;
                        }
                        _ => {
                            if self.timestamp[j] <= self.timestamp[i] && self.dist[j] > self.dist[i]
                            {
                                // Shorten j's path to the source through i (BK's heuristic).
                                self.parent[j] = (d ^ 1) as u8;
                                self.timestamp[j] = self.timestamp[i];
                                self.dist[j] = self.dist[i] + 1;
                            }
                        }
                    }
                }
            } else {
                for d in 0..k {
                    let j = (i as isize + self.offsets[d]) as usize;
                    if self.rcap[j * k + (d ^ 1)] == 0 {
                        continue;
                    }
                    match self.tree[j] {
                        FREE => {
                            self.tree[j] = SINK;
                            self.parent[j] = (d ^ 1) as u8;
                            self.timestamp[j] = self.timestamp[i];
                            self.dist[j] = self.dist[i] + 1;
                            self.set_active(j);
                        }
                        SOURCE => {
                            join = Some((j, d ^ 1));
                            break;
                        }
                        _ => {
                            if self.timestamp[j] <= self.timestamp[i] && self.dist[j] > self.dist[i]
                            {
                                self.parent[j] = (d ^ 1) as u8;
                                self.timestamp[j] = self.timestamp[i];
                                self.dist[j] = self.dist[i] + 1;
                            }
                        }
                    }
                }
            }

            self.time += 1;
            match join {
                Some((u, d)) => {
                    // Keep growing from i next time: it may have more paths.
                    current = Some(i);
                    self.augment(u, d);
                    self.adopt_orphans();
                }
                None => current = None,
            }
        }
        self.flow
    }

    #[inline]
    fn parent_node(&self, i: usize) -> usize {
        (i as isize + self.offsets[self.parent[i] as usize]) as usize
    }

    /// Pushes the bottleneck along source → … → u → v → … → sink, where `v = u + offsets[d]`.
    fn augment(&mut self, u: usize, d: usize) {
        let k = self.k;
        let v = (u as isize + self.offsets[d]) as usize;
        let mut bottleneck = self.rcap[u * k + d];
        // Source half: arcs parent → child.
        let mut x = u;
        while self.parent[x] != TERMINAL {
            let pd = self.parent[x] as usize;
            let p = self.parent_node(x);
            bottleneck = bottleneck.min(self.rcap[p * k + (pd ^ 1)]);
            x = p;
        }
        bottleneck = bottleneck.min(self.tcap[x]);
        // Sink half: arcs child → parent.
        let mut x = v;
        while self.parent[x] != TERMINAL {
            let pd = self.parent[x] as usize;
            bottleneck = bottleneck.min(self.rcap[x * k + pd]);
            x = self.parent_node(x);
        }
        bottleneck = bottleneck.min(-self.tcap[x]);

        self.rcap[u * k + d] -= bottleneck;
        self.rcap[v * k + (d ^ 1)] += bottleneck;
        let mut x = u;
        while self.parent[x] != TERMINAL {
            let pd = self.parent[x] as usize;
            let p = self.parent_node(x);
            self.rcap[x * k + pd] += bottleneck;
            self.rcap[p * k + (pd ^ 1)] -= bottleneck;
            if self.rcap[p * k + (pd ^ 1)] == 0 {
                self.make_orphan(x);
            }
            x = p;
        }
        self.tcap[x] -= bottleneck;
        if self.tcap[x] == 0 {
            self.make_orphan(x);
        }
        let mut x = v;
        while self.parent[x] != TERMINAL {
            let pd = self.parent[x] as usize;
            let p = self.parent_node(x);
            self.rcap[p * k + (pd ^ 1)] += bottleneck;
            self.rcap[x * k + pd] -= bottleneck;
            if self.rcap[x * k + pd] == 0 {
                self.make_orphan(x);
            }
            x = p;
        }
        self.tcap[x] += bottleneck;
        if self.tcap[x] == 0 {
            self.make_orphan(x);
        }
        self.flow += bottleneck as i64;
    }

    #[inline]
    fn make_orphan(&mut self, i: usize) {
        self.parent[i] = ORPHAN;
        self.orphans.push_back(i as u32);
    }

    fn adopt_orphans(&mut self) {
        while let Some(i) = self.orphans.pop_front() {
            self.process_orphan(i as usize);
        }
    }

    /// Residual capacity of the arc that would make `j` (in direction `d` from `i`) the parent
    /// of `i` in `i`'s tree: `j → i` in the source tree, `i → j` in the sink tree.
    #[inline]
    fn tree_arc(&self, i: usize, j: usize, d: usize, tree: u8) -> Capacity {
        if tree == SOURCE {
            self.rcap[j * self.k + (d ^ 1)]
        } else {
            self.rcap[i * self.k + d]
        }
    }

    /// Distance of `j` to its tree's terminal, or infinite if its path meets an orphan;
    /// marks the path with the current time so later checks stop early.
    fn origin_distance(&mut self, j: usize) -> u32 {
        let mut d = 0u32;
        let mut x = j;
        loop {
            if self.timestamp[x] == self.time {
                d += self.dist[x];
                break;
            }
            let a = self.parent[x];
            d += 1;
            if a == TERMINAL {
                self.timestamp[x] = self.time;
                self.dist[x] = 1;
                break;
            }
            if a == ORPHAN {
                return INFINITE_DIST;
            }
            x = self.parent_node(x);
        }
        let mut x = j;
        let mut dd = d;
        while self.timestamp[x] != self.time {
            self.timestamp[x] = self.time;
            self.dist[x] = dd;
            dd -= 1;
            x = self.parent_node(x);
        }
        d
    }

    fn process_orphan(&mut self, i: usize) {
        let tree = self.tree[i];
        let mut best: Option<(usize, u32)> = None;
        for d in 0..self.k {
            let j = (i as isize + self.offsets[d]) as usize;
            if self.tree[j] != tree || self.tree_arc(i, j, d, tree) == 0 {
                continue;
            }
            let dist = self.origin_distance(j);
            if dist != INFINITE_DIST && best.is_none_or(|(_, b)| dist < b) {
                best = Some((d, dist));
            }
        }
        if let Some((d, dist)) = best {
            self.parent[i] = d as u8;
            self.timestamp[i] = self.time;
            self.dist[i] = dist + 1;
            return;
        }
        // No parent: i becomes free; its children become orphans and the neighbours that
        // could reach it become active again.
        for d in 0..self.k {
            let j = (i as isize + self.offsets[d]) as usize;
            if self.tree[j] != tree {
                continue;
            }
            let pj = self.parent[j];
            if self.tree_arc(i, j, d, tree) > 0 {
                self.set_active(j);
            }
            if pj < TERMINAL && self.parent_node(j) == i {
                self.make_orphan(j);
            }
        }
        self.tree[i] = FREE;
        self.parent[i] = NO_PARENT;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// The slow twin: Edmonds–Karp (shortest augmenting paths by BFS) on an explicit
    /// capacity matrix, the textbook algorithm (Cormen et al., ch. 26).
    fn edmonds_karp(cap: &mut [Vec<i64>], s: usize, t: usize) -> i64 {
        let n = cap.len();
        let mut flow = 0;
        loop {
            let mut prev = vec![usize::MAX; n];
            prev[s] = s;
            let mut queue = VecDeque::from([s]);
            while let Some(u) = queue.pop_front() {
                for v in 0..n {
                    if prev[v] == usize::MAX && cap[u][v] > 0 {
                        prev[v] = u;
                        queue.push_back(v);
                    }
                }
            }
            if prev[t] == usize::MAX {
                return flow;
            }
            let mut b = i64::MAX;
            let mut v = t;
            while v != s {
                b = b.min(cap[prev[v]][v]);
                v = prev[v];
            }
            let mut v = t;
            while v != s {
                cap[prev[v]][v] -= b;
                cap[v][prev[v]] += b;
                v = prev[v];
            }
            flow += b;
        }
    }

    #[test]
    fn matches_edmonds_karp_on_random_grids() {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        for case in 0..60 {
            let (w, h) = (rng.gen_range(1..7), rng.gen_range(1..7));
            let conn = if case % 2 == 0 {
                Connectivity::Four
            } else {
                Connectivity::Eight
            };
            let mut g = GridMaxFlow::new(w, h, conn);
            let n = w * h;
            let (s, t) = (n, n + 1);
            let mut cap = vec![vec![0i64; n + 2]; n + 2];
            let mut cut_cost = Vec::new();
            for y in 0..h {
                for x in 0..w {
                    let (a, b) = (rng.gen_range(0..20), rng.gen_range(0..20));
                    g.add_terminal(x, y, a, b);
                    cap[s][y * w + x] += a as i64;
                    cap[y * w + x][t] += b as i64;
                    for (d, &(dx, dy)) in DIRECTIONS.iter().enumerate().take(g.directions()) {
                        let (nx, ny) = (x as isize + dx, y as isize + dy);
                        if d % 2 == 1 || nx < 0 || ny < 0 || nx >= w as isize || ny >= h as isize {
                            continue;
                        }
                        let (f, bk) = (rng.gen_range(0..12), rng.gen_range(0..12));
                        g.add_edge(x, y, d, f, bk);
                        let q = ny as usize * w + nx as usize;
                        cap[y * w + x][q] += f as i64;
                        cap[q][y * w + x] += bk as i64;
                        cut_cost.push((y * w + x, q, f as i64, bk as i64));
                    }
                }
            }
            let original = cap.clone();
            let expected = edmonds_karp(&mut cap, s, t);
            assert_eq!(g.max_flow(), expected, "case {case}: {w}x{h}");
            // The reported cut costs exactly the flow.
            let side = |p: usize| g.segment(p % w, p / w) == Segment::Sink;
            let cut_terminal = |p: usize| {
                if side(p) {
                    original[s][p]
                } else {
                    original[p][t]
                }
            };
            let mut cut: i64 = (0..n).map(cut_terminal).sum();
            for &(p, q, f, bk) in &cut_cost {
                if !side(p) && side(q) {
                    cut += f;
                }
                if side(p) && !side(q) {
                    cut += bk;
                }
            }
            assert_eq!(cut, expected, "case {case}: cut");
        }
    }

    /// A random graph on the pixels where `on(x, y)`, written through `fill_rows`.
    fn fill_random(g: &mut GridMaxFlow, seed: u64, on: impl Fn(usize, usize) -> bool + Sync) {
        let (w, h, k) = (g.width(), g.height(), g.directions());
        g.fill_rows(|y, rcap, tcap| {
            let mut rng = ChaCha8Rng::seed_from_u64(seed * 1000 + y as u64);
            for x in 0..w {
                tcap[x] = 0;
                for d in 0..k {
                    let (dx, dy) = DIRECTIONS[d];
                    let (nx, ny) = (x as isize + dx, y as isize + dy);
                    let inside = nx >= 0 && ny >= 0 && (nx as usize) < w && (ny as usize) < h;
                    let both = on(x, y) && inside && on(nx as usize, ny as usize);
                    rcap[x * k + d] = if both { rng.gen_range(0..12) } else { 0 };
                }
                if on(x, y) {
                    tcap[x] = rng.gen_range(-20..20);
                }
            }
        });
    }

    #[test]
    fn sparse_runs_equal_full_runs() {
        // Several runs on one graph with different free sets, as alpha-expansion does: the
        // flow and the cut of `max_flow_on` equal those of `max_flow` on the same capacities.
        let (w, h) = (9, 7);
        let mut sparse = GridMaxFlow::new(w, h, Connectivity::Eight);
        for seed in 0..12u64 {
            let on = move |x: usize, y: usize| !(x * 7 + y * 3 + seed as usize).is_multiple_of(5);
            fill_random(&mut sparse, seed, on);
            let mut full = sparse.clone();
            let nodes: Vec<u32> = (0..h)
                .flat_map(|y| (0..w).map(move |x| (x, y)))
                .filter(|&(x, y)| on(x, y))
                .map(|(x, y)| sparse.node_of(x, y) as u32)
                .collect();
            let mut short = sparse.clone();
            let flow = full.max_flow();
            assert_eq!(sparse.max_flow_on(&nodes), flow, "seed {seed}");
            assert_eq!(
                short.max_flow_on_from(&nodes, FlowStart::ShortPaths),
                flow,
                "seed {seed}: short paths first"
            );
            for y in 0..h {
                for x in 0..w {
                    assert_eq!(sparse.segment(x, y), full.segment(x, y), "seed {seed}");
                }
            }
            // Back to "no capacity" everywhere before the next free set.
            sparse.reset();
        }
    }

    #[test]
    fn reset_reuses_the_graph() {
        let mut g = GridMaxFlow::new(3, 1, Connectivity::Four);
        g.add_terminal(0, 0, 5, 0);
        g.add_terminal(2, 0, 0, 5);
        g.add_edge(0, 0, 0, 3, 0);
        g.add_edge(1, 0, 0, 2, 0);
        assert_eq!(g.max_flow(), 2);
        assert_eq!(g.segment(1, 0), Segment::Source);
        assert_eq!(g.segment(2, 0), Segment::Sink);
        g.reset();
        g.add_terminal(1, 0, 4, 1);
        assert_eq!(g.max_flow(), 1);
    }
}

// Package flow solves the minimum-cost flow problems behind optimal and
// full matching: a bipartite network of treated and control nodes joined by
// sparse candidate arcs, plus one hub node that every unit may send flow to
// or receive flow from (the "unmatched" bypass, the sink of 1:k matching,
// the spare capacity of full matching).
//
// # Method and why
//
// Successive shortest paths with node potentials (Ahuja, Magnanti & Orlin
// 1993, Network Flows, sections 9.7 and 4.4 for Dijkstra): each augmentation
// sends one unit from a node with excess to the nearest node with deficit
// along a shortest path in reduced costs
//
//	c_h(u,v) = c(u,v) + h(u) - h(v) >= 0,
//
// found by Dijkstra's algorithm that stops at the first deficit node it
// settles. Only the nodes settled in that search get new potentials,
// h(v) += d(v) - D (D = distance of the deficit node reached); this differs
// from the textbook h += min(d, D) by the constant -D for every node, which
// leaves all reduced costs unchanged, and keeps one augmentation's work
// proportional to the region it explored rather than to the whole network.
// On propensity-score data that region is small: the shortest augmenting
// path from a treated unit almost always ends at a nearby free control.
// Network simplex and cost scaling have better worst cases, but neither
// gives this locality as simply, and successive shortest paths leaves exact
// potentials behind, which the caller needs to certify optimality against
// arcs that were never in the network.
//
// The hub is adjacent to every node, so relaxing all its arcs would cost
// O(n) per search. Instead a segment tree keeps, for every node v, the
// smallest c(hub,v) - h(v) over v's residual hub arcs; when the hub is
// settled its neighbours are drawn from the tree in increasing order, one
// at a time, only while they can still beat the deficit node.
//
// When the controls demand flow (full matching), Solve does not start from
// zero flow: every control first takes its cheapest candidate arc, with
// its potential set to that arc's cost, and treated units chosen by
// several controls take the surplus from the hub (see warmStart for why
// the reduced costs stay >= 0). The hub then has a deficit instead of an
// excess, so the remaining searches, from treated units no control chose,
// end when they reach the hub rather than expanding out of it to every
// treated unit. On the benchmark design of package assign this turned the
// roughly quadratic time into near-linear (n = 50,000: about 100 s before,
// 0.2 s after).
//
// Supplies are then routed in two phases: every unit node with excess pushes
// to the nearest deficit, then every unit node left with a deficit pulls
// from the nearest excess by the same search on the reversed residual
// graph. Between calls to Solve, Reset restarts from zero flow: saturating
// only the new arcs (the warm restart) was measured to shift whole regions'
// potentials by the penalty Tier, which then fails the caller's check.
//
// Costs are lexicographic pairs (Tier, Dist): Tier counts penalty units
// exactly in integers (unmatched treated units, uncovered units), Dist is
// the float64 sum of score distances. Minimising the pair minimises Tier
// first and Dist among the minimisers, with no big-M constant to swamp the
// distances in floating point. Shortest paths, potentials and the
// optimality conditions all hold over any totally ordered abelian group, so
// the pair changes nothing in the theory.
//
// Reduced costs that come out below zero only by floating-point rounding
// are treated as zero in the searches; CheckArcs reports whether every
// residual arc has reduced cost >= -tol.
//
// # What this package must not do
//
// It knows nothing about scores, calipers or strata (package assign builds
// the network) and keeps no global state. It does not read or write files
// or import any database package.
package flow

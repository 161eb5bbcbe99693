// Package compute holds topostate's numerics: preprocessing of region time
// series, sliding-window correlation, k-means connectivity states and the
// elbow, per-subject state dynamics, graph filtrations with their Betti
// curves, Kolmogorov-Smirnov inference and group contrasts.
//
// It does no I/O, knows nothing of files or SQL, and starts no goroutines it
// does not own and join before returning. Every random choice comes from a
// generator or seed the caller supplies, so results are reproducible. The
// formulas are written out in docs/methods.md; each function's comment states its own.
package compute

// Package remote lets `query --nats` ask every live worker and add up their
// answers.
//
// A worker owns a range of partitions (first..last of N, default 16) and its
// own store. Register starts a NATS micro service named "touchledger" on the
// worker's connection; Source, on the query side, implements query.Source by
// asking every worker and adding their tables.
//
// Subjects (prefix default "tl"; full description in docs/remote.md):
//
//	<prefix>.svc.latest                  discovery: every worker answers (no queue group)
//	<prefix>.svc.<first>-<last>.sum      a family summed over a plan's buckets
//	<prefix>.svc.<first>-<last>.buckets  a family per bucket in [from, to)
//
// Inputs: JSON requests. Outputs: a JSON latest reply; sum and buckets reply
// with the binary table encoding of internal/tally. Errors are micro errors
// with codes 400 (bad request), 413 (reply above max_payload), 500 (store).
//
// Merging is exact: every stored counter is an integer sum over events, and a
// user's events all land in one partition, so for any family f and window W
//
//	table(f, W) = Σ over workers w of table_w(f, W)
//
// (the additivity invariant of internal/tally). Markov and Shapley credit,
// which are not sums of per-worker credits, are computed by the querier from
// the merged journey-path counts, so they equal a single store's answer.
//
// Invariants:
//   - An answer is either complete or its missing partitions are known:
//     Source.Missing lists the partitions no worker claimed at discovery,
//     and any failed request afterwards fails the whole answer instead of
//     leaving out a worker silently.
//   - Worker ranges never overlap (overlap is an error: it would count a
//     partition twice); workers with the same range are replicas in one
//     queue group, and one of them answers.
//   - Every worker must keep the same resolutions as the querier plans with
//     (checked at discovery when Options.Resolutions is set).
//   - Each request reads its own consistent snapshot of the worker's store;
//     two requests of one query may see different commits of a live worker.
package remote

// Package stream is touchledger's live input on NATS JetStream: the subject
// layout, an embedded server, the publisher, the partition worker that feeds
// a pipeline.Processor exactly once, and the dead-letter sink.
//
// # Subjects (prefix configurable, default "tl")
//
//	tl.in.<kind>.<ukey>           publishers; kind touch|action, ukey = UserKey(user):
//	                              16 lowercase hex digits of xxhash64(user id)
//	tl.ev.<p>.<kind>.<ukey>       stream TL_EVENTS (subjects tl.ev.>), p = partition
//	tl.dead.<reason>              stream TL_DEAD: rejected and late events
//
// The server maps tl.in.*.* to tl.ev.{{partition(16,2)}}.{{wildcard(1)}}.{{wildcard(2)}}
// (JetStream deterministic subject-mapping partitioning): the user key token
// picks the partition, so one user's events always land in one partition and
// reach one worker in publication order. StartEmbedded installs the mapping;
// deploy/ carries it for clusters. Publishers set Nats-Msg-Id to the event
// id: the stream drops a repeat within its de-duplication window (default
// 2 minutes); a later repeat reaches the worker, whose per-user
// de-duplication counts it as a duplicate.
//
// # Exactly once
//
// A worker owns partitions [first, last] through one durable pull consumer
// tl-worker-<first>-<last> filtering tl.ev.<p>.> for each p, AckPolicy All.
// Its input positions are stream sequences (pipeline source
// stream:<stream>:<first>-<last>). Invariants:
//
//   - Every stream sequence below the committed checkpoint's Next is applied
//     (or, if it was waiting in the reorder buffer, stored with the
//     checkpoint: Config.PersistPending); the checkpoint and the state are
//     one Badger transaction.
//   - At start the consumer is repositioned to Next; nothing below is
//     delivered again and nothing from Next on is skipped, whatever was
//     acknowledged before a crash.
//   - Messages reach the processor in stream order with no gap: the delivery
//     sequence must grow by one per message, otherwise the consumer is
//     repositioned to the first sequence not yet forwarded.
//   - A message is acknowledged only after a commit covering it (OnCommit
//     acknowledges Next−1; AckPolicy All covers everything below), so
//     acknowledgements only stop redelivery; positioning never trusts them.
//   - A dead letter is acknowledged by TL_DEAD before the commit that
//     records its position (DeadLetters.Sync), with message id dead-<seq>.
//
// So kill -9 at any moment, redelivery and publisher retries neither lose
// nor double count an event.
//
// # Event time on a live bus
//
// Every Config.TickInterval the worker calls Processor.Tick with the wall
// clock less Config.QuietAfter: once nothing has arrived for QuietAfter, the
// largest event time seen advances with the wall clock (never beyond it
// less QuietAfter, so the watermark stays behind wall clock − lateness), and
// a quiet partition releases buffered events and closes sessions. The lag
// keeps messages still in flight on the bus from being overtaken and made
// late; with lateness 0 an event is visible after the next event or, at the
// end of a burst, after QuietAfter.
//
// # Erasure on a running worker
//
// The processor is not safe for concurrent use, so requests for it from
// other goroutines go through a command channel that Run serves between two
// chunks of input (Worker.Forget). ServeAdmin answers erasure requests on
// <prefix>.admin.forget ({"user": "<raw id>"}; every worker, no queue
// group): Processor.Forget deletes the person's session, journey and
// de-duplication state in a commit and drops their events arriving within
// the lateness afterwards; then the worker owning the person's partition
// (PartitionOf: FNV-1a 32 of the user key modulo the partition count, the
// server's partition function) purges their messages from the events
// stream with the subject filter <prefix>.ev.*.*.<ukey> (UserFilter) and
// reports how many it deleted (ForgetReply). Purging is safe for exactly
// once: messages below the committed checkpoint were applied already, and
// purged messages above it are never delivered, so the consumer's delivery
// sequence stays gapless. Dead letters are not purged (their subjects carry
// the reason, not the user).
//
// # Bounds
//
// In flight: one pull request (FetchBatch messages) plus Config.InFlight
// decoded messages waiting for the processing goroutine, plus the reply
// subjects of messages forwarded since the last acknowledgement (at most a
// commit's worth: store.commit_events). The watchdog flags the worker
// stalled when no message arrives for WatchdogTimeout while the consumer
// reports pending messages, and repositions the consumer.
package stream

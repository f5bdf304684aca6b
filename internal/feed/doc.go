// Package feed publishes a live worker's results on NATS for other tools:
// each opened or closed abandonment alert, and credit snapshots per model.
// It runs on its own goroutine beside the worker and reads the worker's
// store through query.Querier snapshots (Badger allows readers beside the
// writer); it never touches the processor.
//
// # Subjects (prefix default "tl")
//
//	<prefix>.alert.<name>     AlertMessage: query.AlertRecord + "event" (opened|closed) + "partitions"
//	<prefix>.report.credit    CreditMessage: query.CreditAnswer of one model + "window", "partitions", "at"
//
// <name> is the alert's name (alert step + "_abandonment") as one subject
// token. Every message carries the header Tl-Partitions; alert messages
// also Nats-Msg-Id = <range>-<name>-<opened Unix s>-<event>, the same for
// every publication of one transition, so a stream capturing the feed (or a
// consumer) can drop a repeat. Each worker publishes about its own
// partitions: rule-based credit and alert counts are per-partition sums;
// Markov and Shapley credit of one worker are not parts of the cluster's
// (query --nats computes those from the merged counts).
//
// # Which intervals count
//
// The abandonment rate of an interval counts the sessions that ended in it
// (a session's funnel counts sit in the bucket of its last event), so an
// interval can still change while its sessions can still grow. The feed
// looks only at final intervals: those ending at or before
//
//	settled = ⌊(watermark − session_gap) / interval⌋ · interval   (Unix seconds)
//
// Events below the watermark are applied before the commit that reports
// it, and any event applied later is at or after the watermark (an older
// one is late), hence at least a session gap after the last event of any
// session that ended before settled: it starts a new session (config
// session_gap: an action whose gap to the user's previous action is at
// least this starts a new session). The chart of final intervals never
// changes, so the feed never has to take an announcement back; the price is
// a delay of session_gap + lateness + one interval behind the newest
// events. `query alerts` on a live worker also shows the intervals after
// settled.
//
// # Exactly once per transition
//
// Whenever settled moves, the feed evaluates the chart (a query.Request of kind alerts
// over [settled − Lookback, settled), warmed up over the alert baseline
// before it) and compares it with the last published state of the alert: the
// alert it announced as open, and the opening time of the latest alert whose
// whole life was announced ("done"). Rules (transitions):
//
//   - the announced open alert, found again by its opening time: still open
//     → nothing; closed → "closed" (with the announced opening time);
//   - it is gone from the chart (a chart evaluated from a later start may
//     drop it) → "closed" as announced, closed at settled;
//   - an alert opened after "done" and not announced: open → "opened";
//     already closed → "opened" then "closed";
//   - alerts opened at or before "done" are history.
//
// The state is kept in memory and, after every publication has been
// flushed to the server, in Options.StateFile (JSON, replaced atomically).
// A failed publication or flush leaves the state as it was and evaluates
// again at the next poll, so a message may then go out twice (same
// Nats-Msg-Id); nothing is lost.
//
// Start rule (restart): Start runs before the worker consumes. With a state
// file, announcements resume from it: an alert open in the committed data
// is announced only if the file does not say it was. Without one (or
// without an entry for the alert's name, or with an unreadable file), a
// store with no committed data has announced nothing, so everything later
// is announced; a store with committed data (a directory from before
// feeds, restored from a backup, or a changed alert step) counts what its
// final intervals show as announced: nothing is published for an alert
// already open then, and its close is published later. A crash between a flush and the file's replacement
// publishes those transitions again at the restart (same Nats-Msg-Id).
//
// # Credit snapshots
//
// Every ReportInterval (default 1 minute; 0 disables) the feed publishes
// one CreditMessage per model (default every model) with
// query.Request{Kind: credit, Model: model, Window: Span{Last: ReportWindow}} —
// the answer of `query credit --model M --last WINDOW --format json` on the
// worker's data at that moment.
package feed

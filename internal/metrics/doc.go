// Package metrics exposes a worker's progress and its rolling-window answers
// as Prometheus metrics (namespace touchledger), built from an injected
// prometheus.Registerer.
//
// Inputs: a StatusSource (the processor's committed progress,
// pipeline.Processor.Status), an optional QuerierOpener (a snapshot of the
// committed counters, for the rolling-window gauges), an optional consumer
// lag function (the stream layer's count of messages not yet delivered), and
// ObserveCommit calls for the commit latency histogram.
//
// Output, per scrape:
//
//	touchledger_events_total{outcome}            counter  accepted | duplicate | late | rejected (late excluded)
//	touchledger_rejects_total{reason}            counter  every reason of event.Reasons; reason="late" is the late count
//	touchledger_consumer_lag_messages            gauge    stream messages not yet delivered (only with ConsumerLag)
//	touchledger_watermark_delay_seconds          gauge    wall clock − committed watermark
//	touchledger_buffered_events                  gauge    events in the reorder buffer at the last commit
//	touchledger_commit_duration_seconds          histogram one observation per ObserveCommit call
//	touchledger_open_sessions                    gauge    approximation, see below
//	touchledger_open_journeys                    gauge    approximation, see below
//	touchledger_credited_conversions{model,channel} gauge credited conversions over the window
//	touchledger_credited_value{model,channel}    gauge    credited value (currency units) over the window
//	touchledger_abandonment_ratio{step}          gauge    1 − reached(next)/reached(step), last complete interval
//	touchledger_alert_open{name}                 gauge    1 while an alert is open, else 0
//
// Invariants:
//
//   - Counters never drift from the store: they are built at scrape time
//     from Status().Counts, the counts committed in the same Badger
//     transaction as the state they describe. So
//     events_total{outcome="accepted"} is exactly the committed accepted
//     count, and sum over reason of rejects_total equals
//     events_total{outcome="rejected"} + events_total{outcome="late"}.
//     They are left out until the processor's first commit in this process:
//     before it Status() holds zeros, and a 0 followed by the restored
//     cumulative count would look like a huge increase to rate().
//   - Label values are bounded: at most MaxChannels channel values per model
//     (the MaxChannels−1 channels with the largest absolute credited
//     conversions, the rest summed into channel="other"), the fixed model,
//     outcome and reason lists, the funnel steps and the alert names.
//   - Every number derived from the counters is a function of the committed
//     state, so it is recomputed only when Status().Commits changes (at most
//     once per commit, however often Prometheus scrapes).
//
// Approximations (documented, not exact):
//
//   - open_sessions = sessions whose last action lies within SessionGap of
//     the latest event time: the Funnel family counts each session at its
//     last action (sessionize/aggregates.go), and a session is still open
//     while no gap of SessionGap has passed. The window is widened to bucket
//     edges (5 minutes by default), so it may count a few sessions that just
//     closed.
//   - open_journeys = unconverted journeys whose last touch lies within
//     JourneyTimeout of the latest event time: JourneyPaths counts each
//     journey at its last touch (open ones as not converted), and a journey
//     ends unconverted only after JourneyTimeout without a touch. Path
//     counters are kept at hour resolution, so the window is widened to
//     whole hours.
//
// Abandonment: the last complete interval is the latest [s, s+Interval) with
// s a multiple of Interval and s+Interval ≤ the committed watermark (every
// event before the watermark has been applied). abandonment(step i) =
// 1 − reached(i+1)/reached(i) over sessions ending in that interval, the
// in-order funnel drop-off of query.Funnel (common practice). Steps no session
// reached, and the last step, are left out.
//
// Commit latency: the stream layer calls ObserveCommit from
// pipeline.Config.OnCommit with Processor.Status().CommitTook (Status is
// updated before OnCommit runs), so every commit is observed once. The
// histogram is not polled at scrape time: polling would see only the last
// of the commits between two scrapes.
package metrics

// Package query is touchledger's read model: every question any surface
// asks (the query command, the HTTP API, the NATS ask endpoint, the
// dashboard, the feeds, the metrics) goes through it the same way.
//
//	text parameters ─► ParseRequest ─► Request ─► Request.Validate ─► Querier.Answer ─► Answer ─► Render
//	(flags, URL query,   (Kind.Params:   (typed)    (*ParamError naming   (one window     (typed:      (table, JSON,
//	 NATS ask params)     which apply)               the parameter)         plan, Source)   time.Time)   CSV, partial note)
//
// A Request names its Kind and the parameters that kind takes
// (Kind.Params); a parameter another kind takes, or one that does not apply
// (order outside the markov model and channel transitions, campaign
// grouping for a data-driven model), is a *ParamError whose message starts
// with the parameter's name, the same words on every surface (the CLI prints
// it after "query <command>: ", HTTP answers it with 400, the NATS service
// with error code 400). IsParamError tells those apart from the reader's
// failures.
//
// # One window per answer
//
// Querier.Answer plans the window once per request (plan): a window whose
// edges fall on buckets that every family the answer reads holds is covered
// exactly; any other window is rounded out over the resolutions every family
// holds (Plan; path statistics start at hours), so a window that needs
// rounding — every "last" window, which ends just after the latest event —
// gives the same from/to in credit under every model, funnel, paths,
// transitions and alerts. Every answer embeds its Coverage: the span
// covered, whether it was rounded, and why (the bucket size at each edge,
// and the retention when finer buckets had expired there). The alert chart
// reads the finest buckets that divide its interval; when their retention
// cuts the window, its Coverage says so.
//
// The latest event is the largest event time seen (Source.Latest); a quiet
// live input moves the watermark, never the latest event, so no answer
// reaches past the last event.
//
// # Sources
//
// A Source is a local store's snapshot (LocalSource) or the sum of every
// worker's tables (internal/remote): every stored aggregate is additive, so
// the models run after adding. A Source with a Missing() []int method makes
// every answer list the partitions that did not answer.
package query

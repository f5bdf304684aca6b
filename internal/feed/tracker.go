package feed

import (
	"time"

	"github.com/touchledger/touchledger/internal/query"
)

// Alert transition events.
const (
	EventOpened = "opened"
	EventClosed = "closed"
)

// AlertMessage is the body of <prefix>.alert.<name>: the alert record as
// `query alerts --format json` shows it, the transition, and the range of
// partitions whose data the alert is about.
type AlertMessage struct {
	Event string `json:"event"` // EventOpened or EventClosed
	query.AlertRecord
	Partitions string `json:"partitions"` // the publishing worker's range, "0-7"
}

// nameState is what the feed last published for one alert name: the alert
// it announced as open (nil if none) and the opening time of the latest
// alert whose whole life has been announced (or was history when the
// feed's state began).
type nameState struct {
	Open *query.AlertRecord `json:"open,omitempty"`
	Done string             `json:"done,omitempty"` // RFC 3339; empty: none
}

// transitions compares one evaluation of the chart (the alerts of one name,
// ordered by opening time, as query.Querier.Alerts lists them) with what was
// published and returns the messages to publish and the new state. settled
// is the end of the last final interval of the evaluation. Rules:
//
//   - the announced open alert is found again by its opening time: still
//     open → nothing; closed → "closed";
//   - it is not in the chart any more (a chart evaluated from a later start
//     may drop it) → "closed" with the record as announced, closed at
//     settled;
//   - an alert opened after Done and not announced: open → "opened";
//     already closed → "opened" then "closed" (it opened and closed between
//     two evaluations);
//   - alerts opened at or before Done are history: nothing.
//
// The closed message of an announced alert keeps the announced opening
// time, so a consumer can pair the two.
func transitions(s nameState, records []query.AlertRecord, settled time.Time) ([]query.AlertRecord, []string, nameState) {
	var recs []query.AlertRecord
	var evs []string
	emit := func(ev string, r query.AlertRecord) {
		if ev == EventOpened {
			r.Open, r.Closed = true, time.Time{}
		}
		recs, evs = append(recs, r), append(evs, ev)
	}
	done := parse(s.Done)
	var handled time.Time
	if s.Open != nil {
		open := *s.Open
		var match *query.AlertRecord
		for i := range records {
			if records[i].Opened.Equal(open.Opened) {
				match = &records[i]
				break
			}
		}
		switch {
		case match != nil && match.Open:
			r := *match
			s.Open = &r // keep the latest peak
		case match != nil:
			emit(EventClosed, *match)
			s.Open, s.Done, done = nil, query.FormatTime(match.Opened), match.Opened
		default:
			open.Open, open.Closed = false, settled.UTC()
			emit(EventClosed, open)
			s.Open, s.Done, done = nil, query.FormatTime(open.Opened), open.Opened
		}
		handled = open.Opened
	}
	for _, r := range records {
		if r.Opened.Equal(handled) || !r.Opened.After(done) {
			continue
		}
		if r.Open {
			if s.Open == nil {
				emit(EventOpened, r)
				rc := r
				s.Open = &rc
			}
			continue
		}
		if s.Open != nil {
			// A closed alert beside an announced open one: alerts do not
			// overlap, so only a chart evaluated from another start shows
			// this; the open alert's close settles it later.
			continue
		}
		emit(EventOpened, r)
		emit(EventClosed, r)
		s.Done, done = query.FormatTime(r.Opened), r.Opened
	}
	return recs, evs, s
}

// baseline is the state that announces nothing for records: their open
// alert counts as announced and their closed ones as history.
func baseline(records []query.AlertRecord) nameState {
	var s nameState
	for _, r := range records {
		if r.Open {
			rc := r
			s.Open = &rc
			continue
		}
		if r.Opened.After(parse(s.Done)) {
			s.Done = query.FormatTime(r.Opened)
		}
	}
	return s
}

// parse reads an RFC 3339 time of an alert record; empty or invalid is the
// zero time (before everything).
func parse(s string) time.Time {
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		return time.Time{}
	}
	return t
}

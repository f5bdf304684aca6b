package feed

import (
	"reflect"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/query"
)

// The records below are invented inputs for the state machine; the rules
// they check are this package's (doc.go), not published values.

var t0 = time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)

func tm(min int) time.Time { return t0.Add(time.Duration(min) * time.Minute) }

func at(min int) string { return query.FormatTime(tm(min)) }

func openRec(opened int, peak float64) query.AlertRecord {
	return query.AlertRecord{Name: "a", Opened: tm(opened), Open: true, Rate: 0.16, Baseline: 0.1, Limit: 0.115, Peak: peak}
}

func closedRec(opened, closed int) query.AlertRecord {
	r := openRec(opened, 0.2)
	r.Open, r.Closed = false, tm(closed)
	return r
}

type step struct {
	records []query.AlertRecord
	settled int // minutes after t0
	want    []string
}

func TestTransitions(t *testing.T) {
	tests := []struct {
		name  string
		start nameState
		steps []step
	}{
		{"opens, stays open, closes", nameState{}, []step{
			{nil, 30, nil},
			{[]query.AlertRecord{openRec(35, 0.16)}, 40, []string{"opened " + at(35)}},
			{[]query.AlertRecord{openRec(35, 0.18)}, 45, nil},
			// The close is decided close_after intervals later; Closed lies
			// before the previous settled boundary.
			{[]query.AlertRecord{closedRec(35, 45)}, 60, []string{"closed " + at(35)}},
			{[]query.AlertRecord{closedRec(35, 45)}, 65, nil},
		}},
		{"opens and closes between two evaluations", nameState{}, []step{
			{[]query.AlertRecord{closedRec(35, 45)}, 60, []string{"opened " + at(35), "closed " + at(35)}},
			{[]query.AlertRecord{closedRec(35, 45)}, 65, nil},
		}},
		{"a closed one and a new open one at once", nameState{}, []step{
			{[]query.AlertRecord{closedRec(35, 45), openRec(70, 0.2)}, 75,
				[]string{"opened " + at(35), "closed " + at(35), "opened " + at(70)}},
			{[]query.AlertRecord{closedRec(35, 45), openRec(70, 0.2)}, 80, nil},
		}},
		{"announced open alert closes, next one opens", nameState{Open: ptr(openRec(35, 0.16))}, []step{
			{[]query.AlertRecord{closedRec(35, 45), openRec(70, 0.2)}, 75, []string{"closed " + at(35), "opened " + at(70)}},
		}},
		{"announced open alert gone from the chart", nameState{Open: ptr(openRec(35, 0.16))}, []step{
			{nil, 90, []string{"closed " + at(35) + " at " + at(90)}},
			{nil, 95, nil},
		}},
		{"history before done stays silent", nameState{Done: at(35)}, []step{
			{[]query.AlertRecord{closedRec(20, 30), closedRec(35, 45)}, 60, nil},
			{[]query.AlertRecord{closedRec(35, 45), openRec(70, 0.2)}, 75, []string{"opened " + at(70)}},
		}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			s := tt.start
			for i, st := range tt.steps {
				recs, evs, next := transitions(s, st.records, t0.Add(time.Duration(st.settled)*time.Minute))
				var got []string
				for j, r := range recs {
					g := evs[j] + " " + query.FormatTime(r.Opened)
					if evs[j] == EventClosed && !r.Closed.Equal(closedOf(st.records, r.Opened)) {
						g += " at " + query.FormatTime(r.Closed)
					}
					if (evs[j] == EventOpened) != r.Open {
						t.Errorf("step %d: %s message with open=%v", i, evs[j], r.Open)
					}
					got = append(got, g)
				}
				if !reflect.DeepEqual(got, st.want) {
					t.Errorf("step %d: got %q, want %q", i, got, st.want)
				}
				s = next
			}
		})
	}
}

// closedOf returns the Closed time of the record opened at opened.
func closedOf(records []query.AlertRecord, opened time.Time) time.Time {
	for _, r := range records {
		if r.Opened.Equal(opened) {
			return r.Closed
		}
	}
	return time.Time{}
}

func ptr(r query.AlertRecord) *query.AlertRecord { return &r }

func TestBaseline(t *testing.T) {
	tests := []struct {
		name    string
		records []query.AlertRecord
		want    nameState
	}{
		{"empty", nil, nameState{}},
		{"closed ones are history", []query.AlertRecord{closedRec(20, 30), closedRec(35, 45)}, nameState{Done: at(35)}},
		{"the open one counts as announced", []query.AlertRecord{closedRec(20, 30), openRec(35, 0.2)},
			nameState{Done: at(20), Open: ptr(openRec(35, 0.2))}},
	}
	for _, tt := range tests {
		got := baseline(tt.records)
		if !sameState(got, tt.want) {
			t.Errorf("%s: baseline = %+v, want %+v", tt.name, got, tt.want)
		}
		// Nothing is announced again for what the baseline saw.
		if recs, _, _ := transitions(got, tt.records, t0.Add(2*time.Hour)); len(recs) != 0 {
			t.Errorf("%s: transitions after the baseline: %+v", tt.name, recs)
		}
	}
}

func TestAlertSubject(t *testing.T) {
	tests := []struct{ prefix, name, want string }{
		{"tl", "basket_add_abandonment", "tl.alert.basket_add_abandonment"},
		{"shop.tl", "basket add.now*>_abandonment", "shop.tl.alert.basket_add_now___abandonment"},
	}
	for _, tt := range tests {
		if got := AlertSubject(tt.prefix, tt.name); got != tt.want {
			t.Errorf("AlertSubject(%q, %q) = %q, want %q", tt.prefix, tt.name, got, tt.want)
		}
	}
}

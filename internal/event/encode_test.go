package event

import (
	"reflect"
	"testing"
	"time"
)

func TestAppendJSONRoundTrip(t *testing.T) {
	ts := time.Date(2026, 10, 1, 12, 30, 15, 123456789, time.UTC)
	for _, e := range []Event{
		{ID: "a1", User: "p1-ab", Time: ts, Kind: Touch, Channel: "mail", Campaign: "spring \"sale\"", Interaction: View},
		{ID: "a2", User: "u", Time: ts, Kind: Touch, Channel: "search"},
		{ID: "a3", User: "u", Time: ts, Kind: Action, Action: "order", Value: 12_000_005, HasValue: true, Currency: "EUR"},
		{ID: "a4", User: "u", Time: ts, Kind: Action, Action: "product_view"},
		{ID: "a5", User: "u", Time: ts, Kind: Action, Action: "order", Value: 0, HasValue: true},
	} {
		d := NewDecoder(DefaultLimits(), "")
		got, err := d.Decode(AppendJSON(nil, &e))
		if err != nil {
			t.Fatalf("%s: %v (%s)", e.ID, err, AppendJSON(nil, &e))
		}
		if !reflect.DeepEqual(got, e) {
			t.Errorf("round trip %s:\n got %+v\nwant %+v", AppendJSON(nil, &e), got, e)
		}
	}
}

package event

import (
	"fmt"
	"strings"
	"time"
)

// Kind says whether an event is a marketing touchpoint or a clickstream action.
type Kind uint8

const (
	// Touch is a marketing touchpoint: an ad click or view, an e-mail click, ...
	Touch Kind = 1
	// Action is a clickstream action on the shop: product_view, basket_add, ...
	Action Kind = 2
)

// Reserved names. Journeys and sessions gain states that no event names:
// every journey runs from StateEntry through its channels to StateConverted
// or StateLost, every session from StateEntry through its actions to
// StateExit. Those states are written among channel and action names (in
// transitions and paths), so names beginning with ReservedPrefix belong to
// them alone: an event whose channel, campaign or action begins with it is
// rejected with ReasonBadField.
const (
	ReservedPrefix = "@"
	StateEntry     = "@entry"     // before a journey's first touch or a session's first action
	StateConverted = "@converted" // a journey's end in a conversion
	StateLost      = "@lost"      // a journey's end without one (timed out, or still open)
	StateExit      = "@exit"      // a session's end
)

// IsReserved reports whether name begins with ReservedPrefix.
func IsReserved(name string) bool { return strings.HasPrefix(name, ReservedPrefix) }

func (k Kind) String() string {
	switch k {
	case Touch:
		return "touch"
	case Action:
		return "action"
	}
	return fmt.Sprintf("kind(%d)", uint8(k))
}

// Interaction says how a touch reached the person; it selects the look-back
// window (clicks: 30 days by default, views: 1 day).
type Interaction uint8

const (
	// Click is the default interaction.
	Click Interaction = 0
	// View is an exposure without a click.
	View Interaction = 1
)

func (i Interaction) String() string {
	if i == View {
		return "view"
	}
	return "click"
}

// ValueScale is the number of stored units per unit of currency: values are
// kept as int64 micro-units so that sums are exact and associative.
const ValueScale = 1_000_000

// Event is one validated input event. Strings are owned by the Event (safe to
// keep). Time is event time, not arrival time.
type Event struct {
	ID          string
	User        string
	Time        time.Time
	Kind        Kind
	Channel     string      // touch only, non-empty
	Campaign    string      // touch only, may be empty
	Interaction Interaction // touch only
	Action      string      // action only, non-empty
	Value       int64       // action only: value in micro-units (Value/ValueScale currency units); 0 when absent
	HasValue    bool        // action only: the event carried a value
	Currency    string      // as given, may be empty
}

// Reason is a stable, machine-readable code saying why an input was rejected.
// Reasons appear in the rejects file, dead-letter subjects and metrics labels,
// so they never change once released.
type Reason string

const (
	ReasonBadJSON      Reason = "bad_json"      // not a single JSON object, or invalid UTF-8
	ReasonMissingField Reason = "missing_field" // a required field is absent or empty
	ReasonBadField     Reason = "bad_field"     // a field has the wrong type, is too long, holds control characters, or a name begins with the reserved "@"
	ReasonBadTime      Reason = "bad_time"      // time is not RFC 3339 with a zone
	ReasonBadKind      Reason = "bad_kind"      // kind is not "touch"/"action", or interaction not "click"/"view"
	ReasonBadValue     Reason = "bad_value"     // value is negative, not finite, or too large
	ReasonTooLarge     Reason = "too_large"     // the payload exceeds the size limit
	ReasonCurrency     Reason = "currency"      // currency differs from the configured one
	ReasonLate         Reason = "late"          // event time is older than the watermark
	ReasonFuture       Reason = "future"        // event time is too far ahead: of the wall clock (live), of the other events (replay), or after 2099
	ReasonBadSubject   Reason = "bad_subject"   // the bus subject's kind or user key does not match the event
)

// Reasons lists every reason, for metrics and documentation.
var Reasons = []Reason{ReasonBadJSON, ReasonMissingField, ReasonBadField, ReasonBadTime,
	ReasonBadKind, ReasonBadValue, ReasonTooLarge, ReasonCurrency, ReasonLate, ReasonFuture, ReasonBadSubject}

// RejectError is the error returned for any input that is not accepted.
type RejectError struct {
	Reason Reason
	Field  string // the offending field, if any
	Msg    string // human-readable detail, lowercase
}

func (e *RejectError) Error() string {
	if e.Field != "" {
		return fmt.Sprintf("%s: field %q: %s", e.Reason, e.Field, e.Msg)
	}
	return fmt.Sprintf("%s: %s", e.Reason, e.Msg)
}

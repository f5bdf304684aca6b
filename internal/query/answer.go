package query

import (
	"encoding/json"
	"fmt"
	"io"
)

// Answer is the typed answer to one Request: exactly the field of its Kind
// is set. Times are time.Time (UTC), numbers typed; rendering (Render) is
// apart from computing (Querier.Answer).
type Answer struct {
	Kind        Kind
	Credit      *CreditAnswer
	Shift       *ShiftAnswer
	Transitions *TransitionsAnswer
	Paths       *PathsAnswer
	Funnel      *FunnelAnswer
	Alerts      *AlertsAnswer
	Status      *StatusAnswer
	Scorecard   *ScorecardAnswer
}

// Value returns the answer of its kind (a pointer to one of the typed
// answers), nil for an empty Answer.
func (a Answer) Value() any {
	switch a.Kind {
	case KindCredit:
		return a.Credit
	case KindShift:
		return a.Shift
	case KindTransitions:
		return a.Transitions
	case KindPaths:
		return a.Paths
	case KindFunnel:
		return a.Funnel
	case KindAlerts:
		return a.Alerts
	case KindStatus:
		return a.Status
	case KindScorecard:
		return a.Scorecard
	}
	return nil
}

// MarshalJSON writes the typed answer of its kind: the JSON every surface
// serves.
func (a Answer) MarshalJSON() ([]byte, error) { return json.Marshal(a.Value()) }

// DecodeAnswer reads the JSON of an answer of kind k (as MarshalJSON wrote
// it).
func DecodeAnswer(k Kind, b []byte) (Answer, error) {
	a := Answer{Kind: k}
	var dst any
	switch k {
	case KindCredit:
		a.Credit = new(CreditAnswer)
		dst = a.Credit
	case KindShift:
		a.Shift = new(ShiftAnswer)
		dst = a.Shift
	case KindTransitions:
		a.Transitions = new(TransitionsAnswer)
		dst = a.Transitions
	case KindPaths:
		a.Paths = new(PathsAnswer)
		dst = a.Paths
	case KindFunnel:
		a.Funnel = new(FunnelAnswer)
		dst = a.Funnel
	case KindAlerts:
		a.Alerts = new(AlertsAnswer)
		dst = a.Alerts
	case KindStatus:
		a.Status = new(StatusAnswer)
		dst = a.Status
	case KindScorecard:
		a.Scorecard = new(ScorecardAnswer)
		dst = a.Scorecard
	default:
		_, err := ParseKind(string(k))
		return Answer{}, err
	}
	if err := json.Unmarshal(b, dst); err != nil {
		return Answer{}, fmt.Errorf("decode %s answer: %w", k, err)
	}
	return a, nil
}

// RenderOptions are presentation choices that do not change the answer.
type RenderOptions struct {
	Chart bool // table format: add text bar charts (credit, shift)
}

// Render writes an answer as a table, JSON or CSV. Tables and CSV start
// with the partial-answer note when partitions are missing; JSON carries
// missing_partitions.
func Render(w io.Writer, a Answer, f Format, o RenderOptions) error {
	switch a.Kind {
	case KindCredit:
		return WriteCredit(w, *a.Credit, f, o.Chart)
	case KindShift:
		return WriteShift(w, *a.Shift, f, o.Chart)
	case KindTransitions:
		return WriteTransitions(w, *a.Transitions, f)
	case KindPaths:
		return WritePaths(w, *a.Paths, f)
	case KindFunnel:
		return WriteFunnel(w, *a.Funnel, f)
	case KindAlerts:
		return WriteAlerts(w, *a.Alerts, f)
	case KindStatus:
		return WriteStatus(w, *a.Status, f)
	case KindScorecard:
		return WriteScorecard(w, *a.Scorecard, f)
	}
	return fmt.Errorf("render: empty answer")
}

// Missing lists the partitions that did not answer.
func (a Answer) Missing() []int {
	switch a.Kind {
	case KindCredit:
		return a.Credit.MissingPartitions
	case KindShift:
		return a.Shift.MissingPartitions
	case KindTransitions:
		return a.Transitions.MissingPartitions
	case KindPaths:
		return a.Paths.MissingPartitions
	case KindFunnel:
		return a.Funnel.MissingPartitions
	case KindAlerts:
		return a.Alerts.MissingPartitions
	case KindStatus:
		return a.Status.MissingPartitions
	case KindScorecard:
		return a.Scorecard.MissingPartitions
	}
	return nil
}

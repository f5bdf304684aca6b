package query

import (
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
)

// Kind names what a Request asks for.
type Kind string

// The kinds of question. Every surface (CLI subcommand, HTTP endpoint, NATS
// ask endpoint, dashboard, feeds, metrics) asks one of these.
const (
	KindCredit      Kind = "credit"
	KindShift       Kind = "shift"
	KindTransitions Kind = "transitions"
	KindPaths       Kind = "paths"
	KindFunnel      Kind = "funnel"
	KindAlerts      Kind = "alerts"
	KindStatus      Kind = "status"
	KindScorecard   Kind = "scorecard"
)

// Kinds lists every kind in the order help texts show them.
var Kinds = []Kind{KindCredit, KindShift, KindTransitions, KindPaths, KindFunnel, KindAlerts, KindStatus, KindScorecard}

// Levels of transitions and paths.
const (
	LevelChannel = "channel" // journeys: channel → channel
	LevelAction  = "action"  // sessions: action → action
)

// Defaults of a Request's optional parameters.
const (
	DefaultDays  = 14
	DefaultTop   = 10
	DefaultOrder = 1
	MaxDays      = 3660
	MaxTop       = 1_000_000
	// MaxOrder is the largest Markov order the models support; the
	// configuration's markov_max_order may lower it (Querier.Answer checks).
	MaxOrder = 4
)

// Models lists every attribution model by id: the rule-based models, then
// the data-driven ones. It is the one list every surface shows.
func Models() []string {
	names := make([]string, 0, len(credit.RuleModels)+2)
	for _, m := range credit.RuleModels {
		names = append(names, m.String())
	}
	return append(names, ModelMarkov, ModelShapley)
}

// Request is one question, as every surface asks it. The zero value of an
// optional field means "not given" and takes its default (DefaultOrder,
// DefaultDays, DefaultTop, ByChannel, the last DefaultLast of data).
type Request struct {
	Kind   Kind
	Model  string // credit, shift: a model id (Models)
	Order  int    // Markov order: the markov model, and channel transitions
	By     string // credit: ByChannel or ByCampaign
	Level  string // transitions, paths: LevelChannel or LevelAction
	Window Span   // every kind but shift
	Days   int    // shift: days up to and including the latest event's
	Top    int    // paths: how many
	Points bool   // alerts: also every interval of the chart
	Truth  string // scorecard: the simulated world's truth file
}

// ParamError is a request's fault: Param names the offending parameter the
// same way on every surface (the CLI prefixes "--", HTTP and NATS take it
// as is).
type ParamError struct {
	Param string
	Err   error
}

func (e *ParamError) Error() string { return e.Param + ": " + e.Err.Error() }
func (e *ParamError) Unwrap() error { return e.Err }

func paramErr(param, format string, a ...any) error {
	return &ParamError{Param: param, Err: fmt.Errorf(format, a...)}
}

// IsParamError reports whether err is (or wraps) a ParamError: the asker's
// fault, answered with a usage error (CLI exit 2, HTTP 400).
func IsParamError(err error) bool {
	var p *ParamError
	return errors.As(err, &p) || errors.Is(err, ErrEmptyWindow)
}

// Param describes one parameter of a kind, for parsing and help texts.
type Param struct {
	Name    string
	Help    string
	Default string // shown in help; empty: no default (or required)
	Bool    bool   // a switch: given alone it is true
}

var (
	pModel  = Param{Name: "model", Help: "attribution model id (" + strings.Join(Models(), ", ") + ")"}
	pOrder  = Param{Name: "order", Help: "Markov order, 1 to markov_max_order (the markov model; channel transitions)", Default: "1"}
	pBy     = Param{Name: "by", Help: "group credit by channel or campaign", Default: "channel"}
	pLevel  = Param{Name: "level", Help: "channel (journeys) or action (sessions)"}
	pLast   = Param{Name: "last", Help: "window length ending at the latest event: 30m, 12h, 7d, 1d12h", Default: "30d"}
	pFrom   = Param{Name: "from", Help: "window start: an RFC 3339 time or a date (00:00 UTC)"}
	pTo     = Param{Name: "to", Help: "window end, exclusive: an RFC 3339 time or a date (default: just after the latest event)"}
	pDays   = Param{Name: "days", Help: "days to show, 1 to 3660", Default: "14"}
	pTop    = Param{Name: "top", Help: "how many paths, 1 to 1000000", Default: "10"}
	pPoints = Param{Name: "points", Help: "also list every interval of the chart", Bool: true}
	pTruth  = Param{Name: "truth", Help: "the simulated world's truth file (demo --truth FILE)"}
)

var window = []Param{pLast, pFrom, pTo}

var kindParams = map[Kind][]Param{
	KindCredit:      append([]Param{pModel, pOrder, pBy}, window...),
	KindShift:       {pModel, pOrder, pDays},
	KindTransitions: append([]Param{pLevel, pOrder}, window...),
	KindPaths:       append([]Param{pLevel, pTop}, window...),
	KindFunnel:      window,
	KindAlerts:      append([]Param{pPoints}, window...),
	KindStatus:      window,
	KindScorecard:   append([]Param{pTruth}, window...),
}

var kindHelp = map[Kind]string{
	KindCredit:      "conversions and value credited to each channel by a model",
	KindShift:       "each channel's credit per day and the change from the day before",
	KindTransitions: "how journeys move between channels (as the Markov model sees them), or sessions between actions, with row probabilities",
	KindPaths:       "the most frequent whole session or journey paths, with conversion rates",
	KindFunnel:      "sessions reaching each funnel step in order, and where they drop out",
	KindAlerts:      "abandonment spikes after the watched funnel step (EWMA control chart)",
	KindStatus:      "what the data holds",
	KindScorecard:   "each model's credit next to a simulated world's true incremental conversions",
}

// ParseKind checks a kind name.
func ParseKind(s string) (Kind, error) {
	k := Kind(s)
	if _, ok := kindParams[k]; !ok {
		names := make([]string, len(Kinds))
		for i, k := range Kinds {
			names[i] = string(k)
		}
		return "", fmt.Errorf("unknown question %q (one of %s)", s, strings.Join(names, ", "))
	}
	return k, nil
}

// Params lists the parameters kind k takes.
func (k Kind) Params() []Param { return slices.Clone(kindParams[k]) }

// Help says in one line what kind k answers.
func (k Kind) Help() string { return kindHelp[k] }

// ParseRequest builds and validates a Request of kind k from parameters as
// text, the form every surface receives them in (CLI flags, URL query
// parameters, a NATS ask). A parameter k does not take is refused.
// Booleans read 1, 0, true, false, or "" (given alone: true).
func ParseRequest(k Kind, params map[string]string) (Request, error) {
	r := Request{Kind: k}
	specs, ok := kindParams[k]
	if !ok {
		_, err := ParseKind(string(k))
		return r, &ParamError{Param: "kind", Err: err}
	}
	names := make([]string, 0, len(params))
	for name := range params {
		names = append(names, name)
	}
	slices.Sort(names)
	for _, name := range names {
		if !slices.ContainsFunc(specs, func(p Param) bool { return p.Name == name }) {
			return r, paramErr(name, "unknown parameter for %s (%s takes %s)", k, k, paramNames(specs))
		}
	}
	var err error
	num := func(name string, dst *int) {
		if s, ok := params[name]; ok && err == nil {
			n, e := strconv.Atoi(s)
			switch {
			case e != nil:
				err = paramErr(name, "%q is not a whole number", s)
			case n < 1:
				err = paramErr(name, "must be at least 1, got %d", n)
			default:
				*dst = n
			}
		}
	}
	r.Model = params["model"]
	r.By = params["by"]
	r.Level = params["level"]
	r.Truth = params["truth"]
	if s, ok := params["model"]; ok && s == "" {
		return r, paramErr("model", "is empty (use one of %s)", strings.Join(Models(), ", "))
	}
	num("order", &r.Order)
	num("days", &r.Days)
	num("top", &r.Top)
	if err != nil {
		return r, err
	}
	if s, ok := params["points"]; ok {
		if s == "" {
			r.Points = true
		} else if r.Points, err = strconv.ParseBool(s); err != nil {
			return r, paramErr("points", "%q is not a boolean (use 1, 0, true or false)", s)
		}
	}
	if r.Window, err = parseSpan(params); err != nil {
		return r, err
	}
	return r, r.Validate()
}

func paramNames(ps []Param) string {
	names := make([]string, len(ps))
	for i, p := range ps {
		names[i] = p.Name
	}
	return strings.Join(names, ", ")
}

// Epoch and End bound the window edges accepted: event times lie in
// 1970-01-01 to 2099-12-31 (the clock guard of internal/pipeline), and the
// zero time.Time means "not given", so an edge at 0001-01-01 could not be
// told apart.
var (
	Epoch = time.Unix(0, 0).UTC()
	End   = time.Date(2100, 1, 1, 0, 0, 0, 0, time.UTC)
)

// ParseTime reads a window edge: an RFC 3339 time (any zone, returned in
// UTC) or a date, meaning 00:00 UTC.
func ParseTime(s string) (time.Time, error) {
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		if t, err = time.Parse("2006-01-02", s); err != nil {
			return time.Time{}, fmt.Errorf("%q is neither an RFC 3339 time (2026-10-01T12:00:00Z) nor a date (2026-10-01)", s)
		}
	}
	t = t.UTC()
	if t.Before(Epoch) || !t.Before(End) {
		return time.Time{}, fmt.Errorf("%q is outside the event times, 1970-01-01 to 2099-12-31 (leave from out to start at the beginning)", s)
	}
	return t, nil
}

func parseSpan(params map[string]string) (Span, error) {
	var s Span
	var err error
	if v, ok := params["last"]; ok {
		if s.Last, err = config.ParseDuration(v); err != nil {
			return s, &ParamError{Param: "last", Err: err}
		}
		if s.Last == 0 {
			return s, paramErr("last", "must be positive")
		}
	}
	if v, ok := params["from"]; ok {
		if s.From, err = ParseTime(v); err != nil {
			return s, &ParamError{Param: "from", Err: err}
		}
	}
	if v, ok := params["to"]; ok {
		if s.To, err = ParseTime(v); err != nil {
			return s, &ParamError{Param: "to", Err: err}
		}
	}
	return s, nil
}

// given reports whether the parameter's field is set (not its zero value).
func (r Request) given(name string) bool {
	switch name {
	case "model":
		return r.Model != ""
	case "order":
		return r.Order != 0
	case "by":
		return r.By != ""
	case "level":
		return r.Level != ""
	case "last":
		return r.Window.Last != 0
	case "from":
		return !r.Window.From.IsZero()
	case "to":
		return !r.Window.To.IsZero()
	case "days":
		return r.Days != 0
	case "top":
		return r.Top != 0
	case "points":
		return r.Points
	case "truth":
		return r.Truth != ""
	}
	return false
}

var allParams = []Param{pModel, pOrder, pBy, pLevel, pLast, pFrom, pTo, pDays, pTop, pPoints, pTruth}

// Validate checks a request without reading any data: the kind is known,
// every set field is a parameter of the kind and applies (order only to
// the markov model or channel transitions, by=campaign only to rule-based
// models), values are in range and the window is well formed. Errors are
// *ParamError naming the parameter.
func (r Request) Validate() error {
	specs, ok := kindParams[r.Kind]
	if !ok {
		_, err := ParseKind(string(r.Kind))
		return &ParamError{Param: "kind", Err: err}
	}
	for _, p := range allParams {
		if r.given(p.Name) && !slices.Contains(specs, p) {
			return paramErr(p.Name, "does not apply to %s (%s takes %s)", r.Kind, r.Kind, paramNames(specs))
		}
	}
	takes := func(p Param) bool { return slices.Contains(specs, p) }
	if takes(pModel) {
		if r.Model == "" {
			return paramErr("model", "is required (one of %s)", strings.Join(Models(), ", "))
		}
		if !slices.Contains(Models(), r.Model) {
			return paramErr("model", "unknown model %q (use one of %s)", r.Model, strings.Join(Models(), ", "))
		}
	}
	if takes(pLevel) {
		switch r.Level {
		case LevelChannel, LevelAction:
		case "":
			return paramErr("level", "is required: channel or action")
		default:
			return paramErr("level", "unknown level %q: use channel or action", r.Level)
		}
	}
	if r.Order != 0 {
		switch {
		case r.Kind == KindTransitions && r.Level != LevelChannel:
			return paramErr("order", "applies to level channel only")
		case (r.Kind == KindCredit || r.Kind == KindShift) && r.Model != ModelMarkov:
			return paramErr("order", "applies to the markov model only, not %s", r.Model)
		case r.Order < 1 || r.Order > MaxOrder:
			return paramErr("order", "must be 1 to %d, got %d", MaxOrder, r.Order)
		}
	}
	switch r.By {
	case "", ByChannel:
	case ByCampaign:
		if IsDataDriven(r.Model) {
			return paramErr("by", "the %s model credits channels only (no campaign)", r.Model)
		}
	default:
		return paramErr("by", "unknown grouping %q: use channel or campaign", r.By)
	}
	if r.Days < 0 || r.Days > MaxDays {
		return paramErr("days", "must be 1 to %d, got %d", MaxDays, r.Days)
	}
	if r.Top < 0 || r.Top > MaxTop {
		return paramErr("top", "must be 1 to %d, got %d", MaxTop, r.Top)
	}
	if takes(pTruth) && r.Truth == "" {
		return paramErr("truth", "is required (write the file with: demo --truth FILE)")
	}
	return r.Window.Validate()
}

// Validate checks a window: last positive and alone, to only with from,
// from before to, no edge before Epoch.
func (s Span) Validate() error {
	switch {
	case s.Last < 0:
		return paramErr("last", "must be positive")
	case s.Last > 0 && (!s.From.IsZero() || !s.To.IsZero()):
		return paramErr("last", "give either last or from/to, not both")
	case !s.From.IsZero() && s.From.Before(Epoch):
		return paramErr("from", "%s is before %s", FormatTime(s.From), FormatTime(Epoch))
	case !s.To.IsZero() && s.To.Before(Epoch):
		return paramErr("to", "%s is before %s", FormatTime(s.To), FormatTime(Epoch))
	case !s.To.IsZero() && s.From.IsZero():
		return paramErr("to", "needs from")
	case !s.From.IsZero() && !s.To.IsZero() && !s.From.Before(s.To):
		return &ParamError{Param: "from", Err: ErrEmptyWindow}
	}
	return nil
}

// withDefaults fills the optional fields a kind takes.
func (r Request) withDefaults() Request {
	if r.By == "" {
		r.By = ByChannel
	}
	if r.Order == 0 {
		r.Order = DefaultOrder
	}
	if r.Days == 0 {
		r.Days = DefaultDays
	}
	if r.Top == 0 {
		r.Top = DefaultTop
	}
	return r
}

package query

import (
	"fmt"
	"sort"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/sessionize"
	"github.com/touchledger/touchledger/internal/tally"
)

// CreditAnswer is the answer of `query credit`. Its JSON form is part of the
// interface (CLI, HTTP and NATS answers share it).
type CreditAnswer struct {
	Model string `json:"model"`           // the model's id, as the model parameter takes it: linear, markov, ...
	Order int    `json:"order,omitempty"` // markov only: the chain's order (1 to 4)
	Coverage
	By          string          `json:"by"`
	Conversions int64           `json:"conversions"`
	Value       float64         `json:"value"`
	Channels    []ChannelCredit `json:"channels"`
	Notes       []string        `json:"notes,omitempty"`
	// MissingPartitions lists the partitions whose workers did not answer:
	// when set, the numbers leave those partitions out.
	MissingPartitions []int `json:"missing_partitions,omitempty"`
}

// ChannelCredit is one row of a credit answer.
type ChannelCredit struct {
	Channel     string  `json:"channel"`
	Campaign    *string `json:"campaign,omitempty"` // set when grouped by campaign
	Conversions float64 `json:"conversions"`
	Value       float64 `json:"value"`
	Share       float64 `json:"share"`
	Journeys    *int64  `json:"journeys,omitempty"` // data-driven models: journeys that touched the channel
}

// Group names how credit rows are grouped.
const (
	ByChannel  = "channel"
	ByCampaign = "campaign"
)

// ParseBy checks a --by value.
func ParseBy(s string) (string, error) {
	switch s {
	case "", ByChannel:
		return ByChannel, nil
	case ByCampaign:
		return ByCampaign, nil
	}
	return "", fmt.Errorf("unknown grouping %q: use channel or campaign", s)
}

// ModelLabel names a model for people: its id, and for markov its order
// ("markov (order 2)"). JSON and CSV carry the id and the order apart.
func ModelLabel(model string, order int) string {
	if model == ModelMarkov && order > 0 {
		return fmt.Sprintf("%s (order %d)", model, order)
	}
	return model
}

// FormatTime formats a window edge.
func FormatTime(t time.Time) string { return t.UTC().Format(time.RFC3339) }

// RuleCredit builds the credit answer of a rule-based model from the Totals
// and Credit tables of a window.
//
// conversions(channel) = Σ credited nano-conversions / 1e9; share =
// conversions(channel) / Σ conversions(all channels). Each conversion's
// shares were apportioned to sum exactly to 1e9 units, so Σ conversions equals
// the number of conversions in the window.
func RuleCredit(model string, by string, plan Plan, totals, creditT tally.Table) CreditAnswer {
	a := CreditAnswer{Model: model, Coverage: plan.Coverage, By: by}
	tot := totals[""]
	a.Conversions = tot[0]
	a.Value = float64(tot[1]) / event.ValueScale
	type agg struct{ nano, value int64 }
	rows := map[[2]string]*agg{}
	var sum int64
	prefix := model + tally.Sep
	for dims, v := range creditT {
		if !strings.HasPrefix(dims, prefix) {
			continue
		}
		parts := strings.SplitN(dims[len(prefix):], tally.Sep, 2)
		key := [2]string{parts[0], ""}
		if by == ByCampaign && len(parts) == 2 {
			key[1] = parts[1]
		}
		r := rows[key]
		if r == nil {
			r = &agg{}
			rows[key] = r
		}
		r.nano += v[0]
		r.value += v[1]
		sum += v[0]
	}
	for k, r := range rows {
		if r.nano == 0 && r.value == 0 {
			continue
		}
		c := ChannelCredit{
			Channel:     k[0],
			Conversions: float64(r.nano) / sessionize.NanoPerConversion,
			Value:       float64(r.value) / event.ValueScale,
		}
		if by == ByCampaign {
			camp := k[1]
			c.Campaign = &camp
		}
		if sum != 0 {
			c.Share = float64(r.nano) / float64(sum)
		}
		a.Channels = append(a.Channels, c)
	}
	SortChannels(a.Channels)
	if a.Channels == nil {
		a.Channels = []ChannelCredit{}
	}
	return a
}

// SortChannels orders rows by conversions (descending), then name.
func SortChannels(cs []ChannelCredit) {
	sort.Slice(cs, func(i, j int) bool {
		if cs[i].Conversions != cs[j].Conversions {
			return cs[i].Conversions > cs[j].Conversions
		}
		if cs[i].Channel != cs[j].Channel {
			return cs[i].Channel < cs[j].Channel
		}
		ci, cj := "", ""
		if cs[i].Campaign != nil {
			ci = *cs[i].Campaign
		}
		if cs[j].Campaign != nil {
			cj = *cs[j].Campaign
		}
		return ci < cj
	})
}

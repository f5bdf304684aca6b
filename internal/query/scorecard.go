package query

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"sort"
	"strconv"
	"text/tabwriter"
)

// Truth is the ground truth of a simulated world: the conversions each
// channel truly caused (the drop when the world is re-run with that channel
// switched off), as written by `demo --truth`.
type Truth struct {
	IncrementalTotal float64            `json:"incremental_total"`
	Channels         map[string]float64 `json:"channels"`
}

// ReadTruth reads a truth file.
func ReadTruth(path string) (Truth, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return Truth{}, fmt.Errorf("truth file: %w", err)
	}
	var t Truth
	if err := json.Unmarshal(b, &t); err != nil {
		return Truth{}, fmt.Errorf("truth file %s: %w", path, err)
	}
	if len(t.Channels) == 0 || !(t.IncrementalTotal > 0) {
		return Truth{}, fmt.Errorf("truth file %s: no channels or no incremental conversions", path)
	}
	return t, nil
}

// ScorecardAnswer compares each model's credit with the true incremental
// conversions of a simulated world.
type ScorecardAnswer struct {
	Coverage
	Channels []string     `json:"channels"`
	True     []float64    `json:"true_share"` // per channel: incremental conversions / incremental total
	Models   []ModelScore `json:"models"`     // best (smallest error) first
	// MissingPartitions: partitions that did not answer (from the credit answers).
	MissingPartitions []int `json:"missing_partitions,omitempty"`
}

// ModelScore is one model's shares and its distance from the truth.
type ModelScore struct {
	Model string    `json:"model"`           // the model's id
	Order int       `json:"order,omitempty"` // markov only
	Share []float64 `json:"share"`           // per channel, over the channels in the truth
	Error float64   `json:"error"`           // Σ |share − true share|: 0 perfect, 2 disjoint, more only with negative shares
}

// Scorecard scores credit answers against the truth. A model's credit is
// restricted to the channels of the truth (the direct channel, which cannot
// be switched off, has no true effect to compare with) and normalised to
// shares; the error is the total absolute difference of shares (common
// practice for comparing two distributions; 0 = identical, 2 = disjoint).
func Scorecard(answers []CreditAnswer, truth Truth) ScorecardAnswer {
	var a ScorecardAnswer
	for ch := range truth.Channels {
		a.Channels = append(a.Channels, ch)
	}
	sort.Strings(a.Channels)
	for _, ch := range a.Channels {
		a.True = append(a.True, truth.Channels[ch]/truth.IncrementalTotal)
	}
	for _, ans := range answers {
		if a.From.IsZero() {
			a.Coverage = ans.Coverage
		}
		for _, p := range ans.MissingPartitions {
			if !slices.Contains(a.MissingPartitions, p) {
				a.MissingPartitions = append(a.MissingPartitions, p)
			}
		}
		by := map[string]float64{}
		var sum float64
		for _, c := range ans.Channels {
			if _, ok := truth.Channels[c.Channel]; ok {
				by[c.Channel] += c.Conversions
				sum += c.Conversions
			}
		}
		s := ModelScore{Model: ans.Model, Order: ans.Order}
		for i, ch := range a.Channels {
			share := 0.0
			if sum != 0 {
				share = by[ch] / sum
			}
			s.Share = append(s.Share, share)
			s.Error += math.Abs(share - a.True[i])
		}
		a.Models = append(a.Models, s)
	}
	sort.SliceStable(a.Models, func(i, j int) bool { return a.Models[i].Error < a.Models[j].Error })
	return a
}

// WriteScorecard writes a scorecard.
func WriteScorecard(w io.Writer, a ScorecardAnswer, f Format) error {
	if err := writePartial(w, a.MissingPartitions, f); err != nil {
		return err
	}
	switch f {
	case JSON:
		return WriteJSON(w, a)
	case CSV:
		rows := [][]string{{"model", "order", "channel", "share", "true_share", "error"}}
		for _, m := range a.Models {
			for i, ch := range a.Channels {
				rows = append(rows, []string{m.Model, orderText(m.Order), ch, ff(m.Share[i]), ff(a.True[i]), ff(m.Error)})
			}
		}
		return csvOut(w, rows)
	}
	fmt.Fprintf(w, "model scorecard · %s\nshares of credit over the touch channels next to the simulated truth; error = Σ|share − true| (0 perfect; 2 = nothing in common; more only with negative shares)\n\n", a.Coverage)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	head := "MODEL\tERROR\t"
	for _, ch := range a.Channels {
		head += ch + "\t"
	}
	fmt.Fprintln(tw, head)
	row := "simulated truth\t-\t"
	for _, t := range a.True {
		row += pct(t) + "\t"
	}
	fmt.Fprintln(tw, row)
	for _, m := range a.Models {
		row := ModelLabel(m.Model, m.Order) + "\t" + strconv.FormatFloat(m.Error, 'f', 3, 64) + "\t"
		for _, s := range m.Share {
			row += pct(s) + "\t"
		}
		fmt.Fprintln(tw, row)
	}
	return tw.Flush()
}

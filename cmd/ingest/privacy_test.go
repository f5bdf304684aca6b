package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/common/expfmt"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/metrics"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

type fixedStatus pipeline.Status

func (f fixedStatus) Status() pipeline.Status { return pipeline.Status(f) }

// TestNoRawIDsAnywhere (issue 6): with a key configured, recognisable raw
// user ids appear in no file under the data directory, not in the rejects,
// not in the command's log (verbose), not in query answers and not in the
// scraped metrics.
func TestNoRawIDsAnywhere(t *testing.T) {
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 800, 4, 2, 3
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	marked := regexp.MustCompile(`"user":"([^"]+)"`).ReplaceAllString(buf.String(), `"user":"RAWID-$1"`)
	marked += `{"id":"x","user":"RAWID-rejected","time":"soon","kind":"touch","channel":"c"}` + "\n"
	work := t.TempDir()
	input := filepath.Join(work, "e.jsonl")
	os.WriteFile(input, []byte(marked), 0o644)
	key := filepath.Join(work, "key")
	os.WriteFile(key, []byte(strings.Repeat("5a", 32)), 0o600)
	cfgFile := filepath.Join(work, "tl.yaml")
	os.WriteFile(cfgFile, []byte("privacy:\n  key_file: "+key+"\n"), 0o644)
	dir := filepath.Join(work, "data")
	var out, logs bytes.Buffer
	if code := run([]string{"--data", dir, "--replay", input, "--config", cfgFile, "-v"}, &out, &logs); code != 0 {
		t.Fatalf("replay: %s", logs.String())
	}
	scan := func(what string, b []byte) {
		if n := bytes.Count(b, []byte("RAWID")); n > 0 {
			t.Errorf("%s holds %d raw ids", what, n)
		}
	}
	filepath.WalkDir(dir, func(path string, d os.DirEntry, err error) error {
		if err == nil && !d.IsDir() {
			b, _ := os.ReadFile(path)
			scan(path, b)
		}
		return err
	})
	scan("the log", logs.Bytes())
	scan("the summary", out.Bytes())

	cfg, _ := config.Load(cfgFile)
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, cfg))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	open := func() (*query.Querier, error) { return query.NewQuerier(st, query.ParamsFrom(cfg)) }
	q, _ := open()
	for _, m := range []string{"linear", "markov", "shapley"} {
		a, _ := q.Credit(m, query.ByCampaign, 0, query.Span{Last: 30 * 24 * time.Hour})
		var b bytes.Buffer
		query.WriteJSON(&b, a)
		scan("credit "+m, b.Bytes())
	}
	p, _ := q.Paths("channel", 50, query.Span{Last: 30 * 24 * time.Hour})
	var pb bytes.Buffer
	query.WriteJSON(&pb, p)
	scan("paths", pb.Bytes())
	q.Close()

	reg := prometheus.NewRegistry()
	metrics.New(reg, metrics.Options{Status: fixedStatus{Commits: 1, LastCommit: time.Now()}, OpenQuerier: open})
	mfs, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	var mb bytes.Buffer
	for _, mf := range mfs {
		expfmt.MetricFamilyToText(&mb, mf)
	}
	if mb.Len() == 0 {
		t.Fatal("no metrics scraped")
	}
	scan("metrics", mb.Bytes())
	// The marks are there to be found: the input holds them.
	if !strings.Contains(marked, "RAWID") {
		t.Fatal("input not marked")
	}
}

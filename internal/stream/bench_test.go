package stream

import (
	"bytes"
	"context"
	"fmt"
	"math/rand"
	"slices"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// BenchmarkLive measures end-to-end live throughput with the embedded
// server on the demo shop's events (fixed seed, about 141 k events):
//
//   - mode=publish-and-consume: published with Send while a worker consumes
//     them, from the first publication until the worker has committed the
//     last message (issue 4 asks for ≥ 50 k events/s on the project's
//     2-core machine);
//   - mode=backlog: the worker alone, from its start until it has committed
//     a stream that already holds the events (publishers on other machines).
func BenchmarkLive(b *testing.B) {
	input := demoInput(b, 30000, 10)
	n := bytes.Count(input, []byte("\n"))
	pcfg := processorConfig()
	for _, mode := range []string{"publish-and-consume", "backlog"} {
		b.Run("mode="+mode, func(b *testing.B) {
			var total time.Duration
			b.ReportAllocs()
			for b.Loop() {
				b.StopTimer()
				cfg := DefaultConfig()
				bus := startBus(b, cfg)
				var lw *liveWorker
				if mode == "backlog" {
					bus.send(b, input)
				} else {
					lw = startWorker(b, bus, b.TempDir(), pcfg, cfg, cfg.AllPartitions())
				}
				b.StartTimer()
				start := time.Now()
				if mode == "backlog" {
					lw = startWorker(b, bus, b.TempDir(), pcfg, cfg, cfg.AllPartitions())
				} else {
					bus.send(b, input)
				}
				last := bus.lastSeq(b)
				for lw.p.Status().Next <= last {
					time.Sleep(time.Millisecond)
				}
				total += time.Since(start)
				b.StopTimer()
				lw.stop(b)
				b.StartTimer()
			}
			b.ReportMetric(float64(n)*float64(b.N)/total.Seconds(), "events/s")
		})
	}
}

// BenchmarkFreshness publishes events stamped with the wall clock at a
// fixed rate (20 k/s, issue 4) and measures, per event, the time from its
// publication until the worker's committed status counts it as accepted.
// Traffic goes on for lateness + 2 s after the measured events, so they are
// released by later events as in a steady stream, not by the end-of-input
// quiet rule. It reports the 50th and 99th percentiles; issue 4 asks for
// p99 ≤ lateness + 2 s.
func BenchmarkFreshness(b *testing.B) {
	for _, lateness := range []time.Duration{0, time.Second} {
		b.Run(fmt.Sprintf("rate=20k/lateness=%v", lateness), func(b *testing.B) {
			benchFreshness(b, 20000, 3*time.Second, lateness)
		})
	}
}

func benchFreshness(b *testing.B, rate int, length time.Duration, lateness time.Duration) {
	n := int(float64(rate) * length.Seconds())                         // measured events
	total := n + int(float64(rate)*(lateness+2*time.Second).Seconds()) // with the traffic after them
	rng := rand.New(rand.NewSource(7))
	users := make([]string, 5000)
	for i := range users {
		users[i] = fmt.Sprintf("fresh-%05d", i)
	}
	pick := make([]int, total)
	for i := range pick {
		pick[i] = rng.Intn(len(users))
	}
	var p50s, p99s, lates []float64
	b.ReportAllocs()
	for b.Loop() {
		b.StopTimer()
		cfg := DefaultConfig()
		bus := startBus(b, cfg)
		pcfg := processorConfig()
		pcfg.Lateness = lateness
		lw := startWorker(b, bus, b.TempDir(), pcfg, cfg, cfg.AllPartitions())
		b.StartTimer()
		published := make([]time.Time, total)
		type seen struct {
			at       time.Time
			accepted uint64
		}
		var polls []seen
		stopPoll := make(chan struct{})
		pollDone := make(chan struct{})
		go func() {
			defer close(pollDone)
			for {
				polls = append(polls, seen{time.Now(), lw.p.Status().Counts.Accepted})
				select {
				case <-stopPoll:
					return
				case <-time.After(2 * time.Millisecond):
				}
			}
		}()
		start := time.Now()
		var futures []jetstream.PubAckFuture
		for i := range total {
			due := start.Add(time.Duration(i) * time.Second / time.Duration(rate))
			if d := time.Until(due); d > 0 {
				time.Sleep(d)
			}
			now := time.Now()
			published[i] = now
			u := users[pick[i]]
			msg := &nats.Msg{Subject: Subject(cfg.Prefix, KindAction, u), Header: nats.Header{},
				Data: fmt.Appendf(nil, `{"id":"f%d","user":%q,"time":%q,"kind":"action","action":"product_view"}`,
					i, u, now.UTC().Format(time.RFC3339Nano))}
			f, err := bus.js.PublishMsgAsync(msg, jetstream.WithMsgID(fmt.Sprint("f", i)))
			if err != nil {
				b.Fatal(err)
			}
			futures = append(futures, f)
			if len(futures) >= 1024 {
				waitAcks(b, futures)
				futures = futures[:0]
			}
		}
		waitAcks(b, futures)
		for deadline := time.Now().Add(10 * time.Second); lw.p.Status().Counts.Accepted < uint64(n) && time.Now().Before(deadline); {
			time.Sleep(5 * time.Millisecond)
		}
		close(stopPoll)
		<-pollDone
		polls = append(polls, seen{time.Now(), lw.p.Status().Counts.Accepted})
		b.StopTimer()
		late := lw.p.Status().Counts.Late
		lw.stop(b)
		// Events are released in event-time (= publication) order, so
		// event i is visible once the accepted count exceeds i.
		lat := make([]float64, 0, n)
		j := 0
		for i := range n {
			for j < len(polls) && polls[j].accepted <= uint64(i) {
				j++
			}
			if j == len(polls) {
				break
			}
			lat = append(lat, polls[j].at.Sub(published[i]).Seconds())
		}
		if missing := n - len(lat); missing > 0 {
			b.Fatalf("%d of %d measured events not visible within 10 s (%d late)", missing, n, late)
		}
		slices.Sort(lat)
		p50s = append(p50s, lat[n/2])
		p99s = append(p99s, lat[n*99/100])
		lates = append(lates, float64(late))
		b.StartTimer()
	}
	b.ReportMetric(mean(p50s), "p50-s")
	b.ReportMetric(mean(p99s), "p99-s")
	b.ReportMetric(mean(lates), "late-events")
	b.ReportMetric(float64(rate), "events/s")
}

func waitAcks(b *testing.B, fs []jetstream.PubAckFuture) {
	for _, f := range fs {
		select {
		case <-f.Ok():
		case err := <-f.Err():
			b.Fatal(err)
		case <-time.After(10 * time.Second):
			b.Fatal("no publish acknowledgement")
		}
	}
}

func mean(xs []float64) float64 {
	s := 0.0
	for _, x := range xs {
		s += x
	}
	return s / float64(len(xs))
}

// BenchmarkBusOnly is the bus's own speed for comparison: the same events
// published with Send and consumed by a bare pull loop that only
// acknowledges, no processing.
func BenchmarkBusOnly(b *testing.B) {
	input := demoInput(b, 30000, 10)
	n := bytes.Count(input, []byte("\n"))
	var total time.Duration
	b.ReportAllocs()
	for b.Loop() {
		b.StopTimer()
		cfg := DefaultConfig()
		bus := startBus(b, cfg)
		ctx := context.Background()
		cons, err := bus.js.CreateOrUpdateConsumer(ctx, cfg.Stream, jetstream.ConsumerConfig{
			Durable: "bare", AckPolicy: jetstream.AckAllPolicy, FilterSubject: cfg.EventSubjects(), MaxAckPending: 1 << 20})
		if err != nil {
			b.Fatal(err)
		}
		b.StartTimer()
		start := time.Now()
		done := make(chan int)
		go func() {
			got := 0
			for got < n {
				batch, err := cons.Fetch(1000, jetstream.FetchMaxWait(500*time.Millisecond))
				if err != nil {
					b.Error(err)
					break
				}
				var last jetstream.Msg
				for m := range batch.Messages() {
					last = m
					got++
				}
				if last != nil {
					last.Ack()
				}
			}
			done <- got
		}()
		bus.send(b, input)
		<-done
		total += time.Since(start)
	}
	b.ReportMetric(float64(n)*float64(b.N)/total.Seconds(), "events/s")
}

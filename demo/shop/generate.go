package shop

import (
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"time"
)

// Stats counts what Generate wrote.
type Stats struct {
	Events, Touches, Actions int
	Conversions              int     // purchase events
	Value                    float64 // sum of purchase values, in Currency
	PerChannelTouches        map[string]int
}

// Generate writes the world of c as JSON lines, one event per line, sorted by
// time (ties in generation order), and returns what it wrote. It keeps only
// the events of about a week in memory: visitors are played in the order of
// their first visit and a day is written once no later visitor can reach it.
func Generate(w io.Writer, c Config) (Stats, error) {
	st := Stats{PerChannelTouches: make(map[string]int, numChannels)}
	if err := c.Validate(); err != nil {
		return st, err
	}
	wd := newWorld(c)
	order, dayFirst := arrivalOrder(wd)
	enc := newEncoder(w, c)
	v := newVisitor(wd)

	// A visitor arriving on day a writes nothing before day a-preLeadDays.
	lead := preLeadDays + 1
	buckets := make([][]rec, c.Days)
	var spare [][]rec
	// A day holds about eventsPerVisitor·Visitors/Days events once returning
	// visitors have built up; a quarter more avoids most regrowth.
	dayCapacity := max(1024, c.Visitors*eventsPerVisitor*5/4/c.Days)
	keys := make([]uint64, 0, dayCapacity)
	var touches [numChannels]int
	var valueCents int64
	flushed := -1
	for g := range c.Days + lead {
		if g < c.Days {
			for _, idx := range order[dayFirst[g]:dayFirst[g+1]] {
				v.simulate(int(idx), g)
				for _, r := range v.recs {
					day := int(r.t / dayMs)
					if day <= flushed || len(buckets[day]) == math.MaxUint32 {
						return st, fmt.Errorf("visitor %d: event on day %d cannot be placed (written already or day full)", idx, day)
					}
					if buckets[day] == nil {
						if len(spare) > 0 {
							buckets[day], spare = spare[len(spare)-1][:0], spare[:len(spare)-1]
						} else {
							buckets[day] = make([]rec, 0, dayCapacity)
						}
					}
					buckets[day] = append(buckets[day], r)
				}
			}
		}
		f := g - lead
		if f < 0 {
			continue
		}
		b := buckets[f]
		// Sort keys, not records: time of day in the high bits, the
		// position in the bucket (generation order) in the low 32 bits.
		keys = keys[:0]
		for i := range b {
			keys = append(keys, uint64(b[i].t-int64(f)*dayMs)<<32|uint64(i))
		}
		slices.Sort(keys)
		for _, k := range keys {
			r := &b[uint32(k)]
			st.Events++
			if r.kind == kindTouch {
				st.Touches++
				touches[r.ch]++
			} else {
				st.Actions++
				if r.act == actPurchase {
					st.Conversions++
					valueCents += int64(r.cents)
				}
			}
			if err := enc.write(r); err != nil {
				return st, err
			}
		}
		buckets[f] = nil
		spare = append(spare, b[:0])
		flushed = f
	}
	for ch, n := range touches {
		st.PerChannelTouches[channelSpecs[ch].name] = n
	}
	st.Value = float64(valueCents) / 100
	return st, enc.flush()
}

// eventsPerVisitor is the rounded mean number of events per visitor of the
// default world (about 5.2; TestGenerateWritesContractLines checks 4 to 6.5).
const eventsPerVisitor = 5

// arrivalOrder groups visitors by the day of their first visit: the visitors
// arriving on day d are order[dayFirst[d]:dayFirst[d+1]], in index order.
func arrivalOrder(w *world) (order []int32, dayFirst []int) {
	days := make([]int32, w.visitors)
	dayFirst = make([]int, w.days+1)
	for i := range days {
		d := w.arrivalDay(i)
		days[i] = int32(d)
		dayFirst[d+1]++
	}
	for d := range w.days {
		dayFirst[d+1] += dayFirst[d]
	}
	next := slices.Clone(dayFirst[:w.days])
	order = make([]int32, w.visitors)
	for i, d := range days {
		order[next[d]] = int32(i)
		next[d]++
	}
	return order, dayFirst
}

// encoder writes records as JSON lines through its own buffer.
type encoder struct {
	w         io.Writer
	buf       []byte
	startMs   int64
	campaigns []string
	dayKey    int64  // day (since the Unix epoch) of datePrefix
	date      []byte // "2006-01-02T" of dayKey
}

const encoderFlushAt = 1 << 20

func newEncoder(w io.Writer, c Config) *encoder {
	e := &encoder{
		w:       w,
		buf:     make([]byte, 0, encoderFlushAt+1024),
		startMs: c.Start.UnixMilli(),
		dayKey:  -1 << 62,
	}
	e.campaigns = append(e.campaigns, campaignNames[:]...)
	for week := range (c.Days+6)/7 + 1 {
		e.campaigns = append(e.campaigns, "steeping-notes-"+strconv.Itoa(week+1))
	}
	return e
}

// userWidth is the number of digits in a visitor id ("v0000042").
const userWidth = 7

func appendUser(b []byte, idx int32) []byte {
	b = append(b, 'v')
	var digits [20]byte
	s := strconv.AppendInt(digits[:0], int64(idx), 10)
	for range userWidth - len(s) {
		b = append(b, '0')
	}
	return append(b, s...)
}

func append2(b []byte, x int64) []byte { return append(b, byte('0'+x/10), byte('0'+x%10)) }

// appendTime writes abs (Unix milliseconds) as RFC 3339 UTC with milliseconds.
func (e *encoder) appendTime(b []byte, abs int64) []byte {
	day := abs / dayMs
	if abs < 0 && abs%dayMs != 0 {
		day--
	}
	if day != e.dayKey {
		e.dayKey = day
		e.date = time.UnixMilli(day*dayMs).UTC().AppendFormat(e.date[:0], "2006-01-02T")
	}
	b = append(b, e.date...)
	ms := abs - day*dayMs
	b = append2(b, ms/hourMs)
	b = append(b, ':')
	b = append2(b, ms%hourMs/minuteMs)
	b = append(b, ':')
	b = append2(b, ms%minuteMs/secondMs)
	frac := ms % secondMs
	return append(b, '.', byte('0'+frac/100), byte('0'+frac/10%10), byte('0'+frac%10), 'Z')
}

func appendCents(b []byte, cents int32) []byte {
	b = strconv.AppendInt(b, int64(cents/100), 10)
	return append2(append(b, '.'), int64(cents%100))
}

func (e *encoder) write(r *rec) error {
	b := append(e.buf, `{"id":"`...)
	b = appendUser(b, r.user)
	b = append(b, '-')
	b = strconv.AppendUint(b, uint64(r.n), 10)
	b = append(b, `","user":"`...)
	b = appendUser(b, r.user)
	b = append(b, `","time":"`...)
	b = e.appendTime(b, e.startMs+r.t)
	if r.kind == kindTouch {
		b = append(b, `","kind":"touch","channel":"`...)
		b = append(b, channelSpecs[r.ch].name...)
		b = append(b, `","campaign":"`...)
		b = append(b, e.campaigns[r.camp]...)
		if r.inter == interView {
			b = append(b, `","interaction":"view"}`+"\n"...)
		} else {
			b = append(b, `","interaction":"click"}`+"\n"...)
		}
	} else {
		b = append(b, `","kind":"action","action":"`...)
		b = append(b, actionNames[r.act]...)
		b = append(b, `","value":`...)
		b = appendCents(b, r.cents)
		b = append(b, `,"currency":"`+Currency+`"}`+"\n"...)
	}
	e.buf = b
	if len(b) >= encoderFlushAt {
		return e.flush()
	}
	return nil
}

func (e *encoder) flush() error {
	if len(e.buf) == 0 {
		return nil
	}
	_, err := e.w.Write(e.buf)
	e.buf = e.buf[:0]
	if err != nil {
		return fmt.Errorf("write events: %w", err)
	}
	return nil
}

package shop

import (
	"math"
	"time"
)

const (
	secondMs = int64(1000)
	minuteMs = 60 * secondMs
	hourMs   = 60 * minuteMs
	dayMs    = 24 * hourMs
	weekMs   = 7 * dayMs
)

const (
	kindTouch  uint8 = 1
	kindAction uint8 = 2

	interClick uint8 = 0
	interView  uint8 = 1
)

// rec is one event before encoding; t is milliseconds since Config.Start.
type rec struct {
	t     int64
	user  int32
	cents int32  // actions: item price or basket total
	n     uint16 // the visitor's event number, part of the id
	camp  uint16 // touches: campaign index
	kind  uint8
	ch    uint8 // touches: channel index
	inter uint8 // touches: interClick or interView
	act   uint8 // actions: action code
}

// world is a Config prepared for simulation; it does not change during a run.
type world struct {
	seed       int64
	days       int
	visitors   int
	endMs      int64 // events at or after endMs are outside the period
	shiftMs    int64 // budget shift instant; endMs or later means none
	incFrom    int64 // checkout outage [incFrom, incTo); empty when equal
	incTo      int64
	off        [numChannels]bool
	tierCum    [numTiers]float64
	hourCum    [24]float64
	catalogCum [len(catalogWeight)]float64
	arrivalCum []float64 // per day of the period
}

func newWorld(c Config) *world {
	w := &world{
		seed:     c.Seed,
		days:     c.Days,
		visitors: c.Visitors,
		endMs:    int64(c.Days) * dayMs,
		shiftMs:  int64(c.ShiftDay) * dayMs,
	}
	if c.IncidentLength > 0 {
		w.incFrom = int64(c.IncidentDay)*dayMs + c.IncidentStart.Milliseconds()
		w.incTo = w.incFrom + c.IncidentLength.Milliseconds()
	}
	for name, off := range c.Off {
		if i := channelIndex(name); i >= 0 && off {
			w.off[i] = true
		}
	}
	cumulate(w.tierCum[:], tierShare[:])
	cumulate(w.hourCum[:], hourWeight[:])
	cumulate(w.catalogCum[:], catalogWeight[:])
	w.arrivalCum = make([]float64, c.Days)
	sum := 0.0
	start := c.Start.UTC()
	for d := range c.Days {
		sum += weekdayWeight[start.Add(time.Duration(d)*24*time.Hour).Weekday()]
		w.arrivalCum[d] = sum
	}
	return w
}

func cumulate(dst, weights []float64) {
	sum := 0.0
	for i, x := range weights {
		sum += x
		dst[i] = sum
	}
}

// arrivalDay is the day of the visitor's first visit.
func (w *world) arrivalDay(visitor int) int {
	r := newStream(w.seed, visitor, purposeArrival)
	return r.pick(w.arrivalCum)
}

// budget scales an exposure chance p of channel c at time t by the budget in
// force then, capped at 1.
func (w *world) budget(c int, t int64, p float64) float64 {
	return math.Min(p*w.multiplier(c, t), 1)
}

// multiplier is channel c's budget at time t relative to before the shift.
func (w *world) multiplier(c int, t int64) float64 {
	if t >= w.shiftMs {
		return channelSpecs[c].afterShift
	}
	return 1
}

// peakBudget is the largest budget multiplier channel c ever has.
func peakBudget(c int) float64 { return max(1, channelSpecs[c].afterShift) }

// inBudget thins candidate views drawn at the peak budget: a view at time t
// is kept with chance multiplier(t)/peak, so the views that happen follow the
// budget in force at their own time, even when a window spans the shift.
func (w *world) inBudget(c int, t int64, r *stream) bool {
	return r.float()*peakBudget(c) < w.multiplier(c, t)
}

// visitor is the scratch state for simulating one person; reused across people.
type visitor struct {
	w          *world
	idx        int
	tier       int
	n          uint16
	recs       []rec
	basket     []int32
	visits     int
	visitStart [maxVisits]int64
	visitEnd   [maxVisits]int64
	exposed    [numChannels]int64 // earliest written touch per channel
	purchases  int
	valueCents int64
}

func newVisitor(w *world) *visitor { return &visitor{w: w} }

// simulate plays visitor idx, whose first visit is on day arrival, and leaves
// the events inside the period in v.recs (in generation order).
//
// Order of work, which keeps the runs of one seed comparable: the life stream
// fixes the tier, the visit times and every visit but the last; each channel's
// own stream places that channel's touches on that fixed timeline; the decide
// stream draws the decision number first and then plays the last visit.
func (v *visitor) simulate(idx, arrival int) {
	w := v.w
	v.idx, v.n, v.recs, v.purchases, v.valueCents = idx, 0, v.recs[:0], 0, 0
	for c := range v.exposed {
		v.exposed[c] = math.MaxInt64
	}

	life := newStream(w.seed, idx, purposeLife)
	v.tier = life.pick(w.tierCum[:])
	v.visits = 1 + life.extra(tierReturn[v.tier], maxVisits-1)
	t := int64(arrival)*dayMs + v.timeOfDay(&life)
	for i := range v.visits {
		v.visitStart[i] = t
		if i == v.visits-1 {
			break
		}
		end, _, _ := v.browse(&life, t, browseVisit)
		v.visitEnd[i] = end
		t = v.nextVisit(&life, end)
	}

	for c := range numChannels {
		if c != chCoupon && !w.off[c] {
			v.touches(c)
		}
	}
	v.decide()
}

func (v *visitor) timeOfDay(r *stream) int64 {
	return int64(r.pick(v.w.hourCum[:]))*hourMs + r.between(0, hourMs-1)
}

func (v *visitor) gap(r *stream) int64 {
	g := actionGapMinMs + int64(r.exp(float64(actionGapMean)))
	return min(g, actionGapMaxMs)
}

func (v *visitor) nextVisit(r *stream, end int64) int64 {
	if r.float() < sameDayReturn {
		return end + minVisitGapMs + min(int64(r.exp(float64(sameDayGapMean))), 6*hourMs)
	}
	day := end/dayMs + 1 + int64(r.extra(dayGapMore, maxDayGap-1))
	return max(day*dayMs+v.timeOfDay(r), end+minVisitGapMs)
}

func (v *visitor) item(r *stream) int32 { return catalogCents[r.pick(v.w.catalogCum[:])] }

func (v *visitor) basketTotal() int32 {
	var sum int32
	for _, c := range v.basket {
		sum += c
	}
	if sum < freeShippingFrom {
		sum += shippingCents
	}
	return sum
}

// browse plays a visit that ends without a purchase. It returns the time of
// the last action, and for a visit that reached checkout the checkout time and
// the time of the action before it (else -1, -1).
func (v *visitor) browse(r *stream, start int64, p browseProfile) (end, checkoutAt, before int64) {
	t := start
	v.basket = v.basket[:0]
	views := 1 + r.extra(moreViews, 5)
	for k := range views {
		if k > 0 {
			t += v.gap(r)
		}
		price := v.item(r)
		v.action(t, actViewItem, price)
		if r.float() < p.add {
			t += v.gap(r)
			v.action(t, actBasketAdd, price)
			v.basket = append(v.basket, price)
		}
	}
	if len(v.basket) > 0 && r.float() < p.remove {
		t += v.gap(r)
		v.action(t, actBasketRemove, v.basket[len(v.basket)-1])
		v.basket = v.basket[:len(v.basket)-1]
	}
	if len(v.basket) > 0 && r.float() < p.checkout {
		before = t
		t += v.gap(r)
		v.action(t, actCheckout, v.basketTotal())
		return t, t, before
	}
	return t, -1, -1
}

// touches places channel c's touches on the visitor's timeline, drawing only
// from the channel's own stream.
func (v *visitor) touches(c int) {
	w, sp := v.w, &channelSpecs[c]
	r := newStream(w.seed, v.idx, purposeChannel+uint64(c))
	if sp.reach != [numTiers]float64{} && r.float() >= sp.reach[v.tier] {
		return
	}
	first := v.visitStart[0]
	pre := false
	if sp.preView > 0 && r.float() < math.Min(1, sp.preView*peakBudget(c)) {
		for range 1 + r.intn(sp.maxPre) {
			t := first - r.between(10*minuteMs, preLeadDays*dayMs)
			if w.inBudget(c, t, &r) {
				pre = true
				v.touch(c, t, interView, v.campaign(c, t, &r))
			}
		}
	}
	last := v.visits - 1
	for i := range v.visits {
		s := v.visitStart[i]
		p := sp.visitClick[v.tier]
		if i == 0 {
			p += sp.firstClick[v.tier]
			if pre {
				p += sp.preClick
			}
		}
		if p > 0 && r.float() < w.budget(c, s, p) {
			t := s - r.between(3*secondMs, 90*secondMs)
			v.touch(c, t, interClick, v.campaign(c, t, &r))
		}
		if sp.maxGap == 0 {
			continue
		}
		// views in the gap after visit i; after the last visit the window
		// is anchored at its start, so it does not depend on the decision.
		from, to := s+2*hourMs, s+3*dayMs
		if i < last {
			from, to = v.visitEnd[i]+minuteMs, v.visitStart[i+1]-minuteMs
		}
		if r.float() < math.Min(1, sp.gapView[v.tier]*peakBudget(c)) {
			for range 1 + r.intn(sp.maxGap) {
				if t := r.between(from, to); w.inBudget(c, t, &r) {
					v.touch(c, t, interView, v.campaign(c, t, &r))
				}
			}
		}
	}
}

func (v *visitor) campaign(c int, t int64, r *stream) uint16 {
	switch c {
	case chNewsletter:
		return uint16(campaignLetterBase) + uint16(max(t, 0)/weekMs)
	case chSearch:
		brand := [numTiers]float64{0.2, 0.5, 1}[v.tier]
		if r.float() < brand {
			return uint16(campBrand)
		}
		return uint16(campGeneric)
	case chSocial:
		if t >= v.w.shiftMs {
			return uint16(campSeason)
		}
		return uint16(campProspecting)
	case chReview:
		if r.float() < 0.5 {
			return uint16(campKettleRoundup)
		}
		return uint16(campTeaGuide)
	case chCoupon:
		return uint16(campPartnerCodes)
	case chDisplay:
		return uint16(campBasketReminder)
	default: // chPodcast
		if r.float() < 0.6 {
			return uint16(campMorningRead)
		}
		return uint16(campWeekendChat)
	}
}

// decide draws whether the last visit ends in a purchase and plays it.
//
// One uniform number u decides. [0, base) buys with no channel at all; then
// each channel c in Channels() order owns the next interval of width
// (1-base)·lift(c), and u in c's interval buys exactly when c is switched on
// and one of its touches was written before the visit starts. The intervals
// are disjoint and fixed, so the purchase indicator is additive over channels.
func (v *visitor) decide() {
	w := v.w
	dec := v.visits - 1
	start := v.visitStart[dec]
	d := newStream(w.seed, v.idx, purposeDecide)
	u := d.float()
	base := tierBase[v.tier]
	buyer := u < base
	if !buyer {
		lo := base
		for c := range numChannels {
			width := (1 - base) * channelSpecs[c].lift
			if u < lo+width {
				buyer = !w.off[c] && v.exposed[c] < start
				break
			}
			lo += width
		}
	}
	coupon := newStream(w.seed, v.idx, purposeChannel+chCoupon)
	if buyer {
		v.buy(&d, &coupon, start)
		return
	}
	_, at, before := v.browse(&d, start, decideNoSale)
	if at >= 0 && !w.off[chCoupon] && coupon.float() < channelSpecs[chCoupon].checkoutOther {
		v.couponTouch(&coupon, before, at)
	}
}

// couponTouch writes a coupon-partner click between the action before a
// checkout and the checkout.
func (v *visitor) couponTouch(r *stream, before, checkout int64) {
	t := checkout - 1 - r.between(0, max(checkout-before-2, 0))
	v.touch(chCoupon, t, interClick, v.campaign(chCoupon, t, r))
}

// buy plays a visit that intends to buy: views, basket, checkout and purchase,
// unless the checkout falls into the outage.
func (v *visitor) buy(d, coupon *stream, start int64) {
	w := v.w
	t := start
	v.basket = v.basket[:0]
	views := 1 + d.extra(moreViews, 5)
	var price int32
	for k := range views {
		if k > 0 {
			t += v.gap(d)
		}
		price = v.item(d)
		v.action(t, actViewItem, price)
		if d.float() < buyerAddPerView {
			t += v.gap(d)
			v.action(t, actBasketAdd, price)
			v.basket = append(v.basket, price)
		}
	}
	if len(v.basket) == 0 {
		t += v.gap(d)
		v.action(t, actBasketAdd, price)
		v.basket = append(v.basket, price)
	}
	if len(v.basket) >= 2 && d.float() < buyerRemove {
		t += v.gap(d)
		v.action(t, actBasketRemove, v.basket[len(v.basket)-1])
		v.basket = v.basket[:len(v.basket)-1]
	}
	before := t
	t += v.gap(d)
	total := v.basketTotal()
	v.action(t, actCheckout, total)
	if !w.off[chCoupon] && coupon.float() < channelSpecs[chCoupon].checkoutBuyer {
		v.couponTouch(coupon, before, t)
	}
	if t >= w.incFrom && t < w.incTo && d.float() < incidentFail {
		for range d.intn(3) {
			t += d.between(20*secondMs, 90*secondMs)
			v.action(t, actCheckout, total)
		}
		if d.float() >= incidentRetry {
			return
		}
		day := t/dayMs + 1 + int64(d.intn(3))
		t = max(day*dayMs+v.timeOfDay(d), t+minVisitGapMs)
		v.action(t, actViewItem, v.basket[0])
		t += v.gap(d)
		v.action(t, actCheckout, total)
	}
	t += d.between(20*secondMs, 180*secondMs)
	v.action(t, actPurchase, total)
}

// keep writes r if it lies inside the period and reports whether it did.
func (v *visitor) keep(r rec) bool {
	if r.t < 0 || r.t >= v.w.endMs {
		return false
	}
	r.user = int32(v.idx)
	r.n = v.n
	v.n++
	v.recs = append(v.recs, r)
	return true
}

func (v *visitor) action(t int64, act uint8, cents int32) {
	if v.keep(rec{t: t, kind: kindAction, act: act, cents: cents}) && act == actPurchase {
		v.purchases++
		v.valueCents += int64(cents)
	}
}

func (v *visitor) touch(c int, t int64, inter uint8, camp uint16) {
	if v.keep(rec{t: t, kind: kindTouch, ch: uint8(c), inter: inter, camp: camp}) && t < v.exposed[c] {
		v.exposed[c] = t
	}
}

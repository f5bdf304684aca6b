package shop

// Every number in this file is invented for the sandbox; none is measured
// from a real shop. demo/README.md lists them in prose.

// ShopName is the invented shop the simulator plays.
const ShopName = "Lantern & Moss"

// Currency is the ISO 4217 code on every action event.
const Currency = "EUR"

// Funnel and goal actions, as written in the events.
const (
	ActionProductView  = "product_view"
	ActionBasketAdd    = "basket_add"
	ActionBasketRemove = "basket_remove"
	ActionCheckout     = "checkout"
	ActionOrder        = "order"
)

// action codes in records.
const (
	actViewItem uint8 = iota
	actBasketAdd
	actBasketRemove
	actCheckout
	actPurchase
)

var actionNames = [...]string{ActionProductView, ActionBasketAdd, ActionBasketRemove, ActionCheckout, ActionOrder}

// channel indices; the order is the order of Channels() and of the purchase
// intervals in the decision (see doc.go).
const (
	chNewsletter = iota
	chSearch
	chSocial
	chReview
	chCoupon
	chDisplay
	chPodcast
	numChannels
)

// intent tiers of visitors.
const (
	tierLow = iota
	tierMid
	tierHigh
	numTiers
)

// tierShare is the share of visitors in each tier (invented).
var tierShare = [numTiers]float64{0.55, 0.30, 0.15}

// tierBase is the chance a visitor of the tier buys at the decision visit with
// no channel at all (invented).
var tierBase = [numTiers]float64{0.03, 0.10, 0.35}

// tierReturn is the chance of planning one more visit, repeatedly (invented):
// visits per visitor are 1 + a geometric count, means 1.54, 2.0, 2.5.
var tierReturn = [numTiers]float64{0.35, 0.50, 0.60}

// maxVisits caps the planned visits of one visitor.
const maxVisits = 8

// channelSpec states how a channel reaches visitors and what it does to the
// chance of buying. Probabilities are per visitor or per visit as stated; the
// budget multiplier scales them from Config.ShiftDay on (capped at 1).
type channelSpec struct {
	name string
	// lift is the share of the visitor's remaining chance of not buying
	// (1 - base) that an exposure turns into a purchase: exposure adds
	// (1 - base) * lift to the purchase probability.
	lift float64
	// reach is the share of visitors the channel can reach at all, by tier
	// (newsletter subscribers); 0 means everyone.
	reach [numTiers]float64
	// visitClick is the chance that a visit starts with a click from the
	// channel, by tier; firstClick is added on the first visit only.
	visitClick [numTiers]float64
	firstClick [numTiers]float64
	// preView is the chance of 1..maxPre views before the first visit (up to
	// preLeadDays before it), at the budget before the shift; preClick the
	// chance that, after such views, the first visit starts with a click from
	// the channel.
	preView  float64
	maxPre   int
	preClick float64
	// gapView is the chance of 1..maxGap views in each gap after a visit, by
	// tier, at the budget before the shift. For views the budget works by
	// thinning: candidates are drawn at the channel's peak budget and each is
	// kept with chance (budget at its time)/peak, so the expected number of
	// views follows the budget in force at each view's own time.
	gapView [numTiers]float64
	maxGap  int
	// afterShift multiplies the exposure chances from ShiftDay on.
	afterShift float64
	// checkoutClick: the channel appears only right before a checkout, with
	// these chances for a visitor about to buy and one about to abandon.
	checkoutBuyer, checkoutOther float64
}

// preLeadDays bounds how long before the first visit a pre-visit view can be.
const preLeadDays = 5

// channelSpecs are the seven touch channels (invented). Visits that no touch
// precedes are organic or typed-in ("direct"); they emit no touch event.
var channelSpecs = [numChannels]channelSpec{
	chNewsletter: {
		name: "newsletter", lift: 0.025,
		reach:      [numTiers]float64{0.04, 0.15, 0.35},
		visitClick: [numTiers]float64{0.30, 0.30, 0.30},
		afterShift: 1,
	},
	chSearch: {
		name: "search_ads", lift: 0.012,
		visitClick: [numTiers]float64{0.06, 0.15, 0.35},
		afterShift: 0.4,
	},
	chSocial: {
		name: "social_ads", lift: 0.05,
		visitClick: [numTiers]float64{0.09, 0.07, 0.04},
		preView:    0.08, maxPre: 2,
		gapView: [numTiers]float64{0.06, 0.05, 0.03}, maxGap: 2,
		afterShift: 2.0,
	},
	chReview: {
		name: "review_partners", lift: 0.04,
		visitClick: [numTiers]float64{0.01, 0.015, 0.02},
		firstClick: [numTiers]float64{0.08, 0.09, 0.05},
		afterShift: 1,
	},
	chCoupon: {
		name: "coupon_partners", lift: 0,
		checkoutBuyer: 0.30, checkoutOther: 0.12,
		afterShift: 1,
	},
	chDisplay: {
		name: "display_ads", lift: 0.008,
		visitClick: [numTiers]float64{0.01, 0.01, 0.01},
		gapView:    [numTiers]float64{0.06, 0.12, 0.20}, maxGap: 2,
		afterShift: 1,
	},
	chPodcast: {
		name: "podcast_spots", lift: 0.06,
		preView: 0.10, maxPre: 2, preClick: 0.20,
		afterShift: 1,
	},
}

// campaigns: index into campaignNames; the newsletter's weekly issues are
// added per run (campaignLetterBase + week number since Start).
const (
	campBrand uint8 = iota
	campGeneric
	campProspecting
	campSeason
	campKettleRoundup
	campTeaGuide
	campPartnerCodes
	campBasketReminder
	campMorningRead
	campWeekendChat
	campaignLetterBase
)

var campaignNames = [...]string{
	campBrand:          "brand-terms",
	campGeneric:        "teaware-generic",
	campProspecting:    "autumn-prospecting",
	campSeason:         "fireside-season",
	campKettleRoundup:  "kettle-roundup",
	campTeaGuide:       "first-steep-guide",
	campPartnerCodes:   "partner-codes",
	campBasketReminder: "basket-reminder",
	campMorningRead:    "slow-mornings-read",
	campWeekendChat:    "weekend-kettle-chat",
}

// catalog: item prices in cents and relative popularity (invented).
var catalogCents = [...]int32{1250, 1090, 950, 2900, 1650, 3800, 6400, 2400, 1100, 5000}
var catalogWeight = [...]float64{14, 12, 10, 8, 12, 6, 4, 5, 6, 3}

// shipping is added to a basket below freeShippingFrom (cents, invented).
const (
	shippingCents    = 490
	freeShippingFrom = 4500
)

// hourWeight is the daily rhythm of visit starts, UTC hour 0..23 (invented).
var hourWeight = [24]float64{
	0.35, 0.20, 0.12, 0.10, 0.10, 0.15, 0.30, 0.55, 0.75, 0.85, 0.90, 0.95,
	1.10, 1.05, 0.95, 0.95, 1.00, 1.05, 1.15, 1.35, 1.45, 1.35, 1.00, 0.65,
}

// weekdayWeight is the weekly rhythm of first visits, Sunday..Saturday (invented).
var weekdayWeight = [7]float64{1.15, 1.00, 0.97, 0.97, 1.00, 0.92, 0.95}

// Visit behaviour (invented).
const (
	sameDayReturn  = 0.30 // chance the next visit is later the same day
	minVisitGapMs  = 35 * minuteMs
	sameDayGapMean = 80 * minuteMs // mean extra gap for a same-day return
	maxDayGap      = 10
	dayGapMore     = 0.55 // chance of each extra day between visits on different days

	moreViews      = 0.30 // chance of one more item view, repeatedly (max 5 more)
	actionGapMinMs = 10 * secondMs
	actionGapMean  = 60 * secondMs
	actionGapMaxMs = 12 * minuteMs
)

// browseProfile is how a visit without a decision (or a decision not to buy)
// moves through the funnel.
type browseProfile struct{ add, remove, checkout float64 }

var (
	browseVisit  = browseProfile{add: 0.20, remove: 0.35, checkout: 0.03}
	decideNoSale = browseProfile{add: 0.45, remove: 0.30, checkout: 0.15}
)

// Buying visit and checkout incident (invented).
const (
	buyerAddPerView = 0.60
	buyerRemove     = 0.15
	incidentFail    = 0.90 // chance a checkout fails during the incident
	incidentRetry   = 0.50 // chance a failed buyer comes back 1-3 days later
)

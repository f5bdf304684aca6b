// Package shop simulates Lantern & Moss, an invented online shop for tea and
// teaware, and writes its marketing touches and shop actions as touchledger
// events. It is a sandbox whose true channel effects are known, so attribution
// models can be scored against them; it is not evidence about any real shop.
//
// # Input and output
//
// A Config (seed, start, days, visitors, budget-shift day, checkout outage,
// channels switched off) fully determines the world: Generate writes the same
// bytes for the same Config. Output is JSON lines in event-time order (ties in
// generation order) with exactly the fields of the event contract in the
// event package (internal/event/doc.go): touches carry id, user, time, kind
// "touch", channel, campaign and interaction ("click"/"view"); actions carry
// id, user, time, kind "action", action, value (2 decimals: item price, or
// basket total at checkout and purchase) and currency (EUR). Times are RFC 3339 UTC with milliseconds, inside
// [Start, Start+Days·24h). Ids are "<user>-<n>", n counting the user's written
// events, so they are unique and deterministic. The default world writes about
// 5.2 events per visitor: Visitors = 200 000 gives about 1 M events.
//
// Generate plays visitors in the order of their first visit and writes a day
// once no later visitor can reach it (the earliest event of a visitor is a
// view at most 5 days before the first visit), so memory holds about a week
// of events, not the whole period.
//
// # The world
//
// Every visitor has an intent tier, a base chance to buy, and 1 to 8 planned
// visits (gaps of at least 35 minutes, often days) with a daily and weekly
// rhythm. Every visit but the last browses the funnel (product_view, basket_add,
// basket_remove, rarely checkout). The last visit is the decision: buy
// (basket, checkout, purchase) or not (browse, sometimes abandon at checkout).
// Seven channels place touches on that timeline: some start visits with a
// click, some show views between visits or before the first one; a visit no
// touch precedes is direct and writes no touch. From ShiftDay on, search_ads
// gets 0.4 of its former exposure and social_ads twice as much. During the
// outage, 90 % of purchases fail at checkout (retried checkouts, then half of
// those visitors return one to three days later). All rates are invented; see
// world.go and demo/README.md.
//
// # Ground truth and its invariant
//
// Each visitor draws one uniform number u for the decision, from a stream of
// its own; every purpose (life, decision, each channel) has its own
// splitmix64 stream seeded by (seed, visitor, purpose), so switching channel c
// off removes c's touches and c's effect and changes nothing else, except the
// coupon_partners touches that follow checkouts. With base b and lift a_c:
//
//	[0, b)                         buys with no channel
//	I_c = next interval of width (1−b)·a_c, in Channels() order
//	buys  ⇔  u < b  or  u ∈ I_c for a c that is on and touched the visitor before the decision visit
//
// so P(buy) = b + (1−b)·Σ_{c on, touched} a_c: effects are additive on the
// purchase probability, and because the intervals are fixed and disjoint the
// realised purchase indicator is additive too. Let conv(S) be the purchases
// written with the channel set S on. Then for every c in S
//
//	conv(S) − conv(S∖{c}) = #{visitors with u ∈ I_c, touched by c, whose purchase is written}
//
// and summing over c gives conv(S) − conv(∅): TrueIncremental's per-channel
// values add up exactly to the simulated incremental total. The game
// v(S) = conv(S) − conv(∅) is additive, so these removal differences are also
// its Shapley values (Shapley 1953 [from memory]; formula in docs/references.md §4):
// every marginal contribution of c is the same number. The outage and the end
// of the period remove a buyer's purchase independently of S, which keeps the
// identity. coupon_partners has lift 0 and only appears right before a
// checkout, so its true incremental value is 0 however much credit the
// rule-based models give it.
package shop

package shop

import "maps"

// TrueIncremental returns, for each channel, the conversions the world of c
// loses when that channel alone is also switched off, and the incremental
// total: conversions of c minus conversions with every channel off. Channels
// already off in c get 0. The per-channel values sum exactly to the total
// (see doc.go for why), and for this world they equal the Shapley values of
// the channels in the game "conversions with this set of channels on".
func TrueIncremental(c Config) (map[string]float64, float64, error) {
	if err := c.Validate(); err != nil {
		return nil, 0, err
	}
	with := countConversions(c)
	perChannel := make(map[string]float64, numChannels)
	allOff := maps.Clone(c.Off)
	if allOff == nil {
		allOff = make(map[string]bool, numChannels)
	}
	for _, name := range Channels() {
		allOff[name] = true
		if c.Off[name] {
			perChannel[name] = 0
			continue
		}
		one := c
		one.Off = maps.Clone(c.Off)
		if one.Off == nil {
			one.Off = make(map[string]bool, 1)
		}
		one.Off[name] = true
		perChannel[name] = float64(with - countConversions(one))
	}
	none := c
	none.Off = allOff
	return perChannel, float64(with - countConversions(none)), nil
}

// countConversions plays every visitor of a valid c and counts the purchases
// written inside the period, without encoding anything.
func countConversions(c Config) int {
	w := newWorld(c)
	v := newVisitor(w)
	n := 0
	for i := range w.visitors {
		v.simulate(i, w.arrivalDay(i))
		n += v.purchases
	}
	return n
}

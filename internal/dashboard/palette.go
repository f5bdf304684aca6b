package dashboard

import (
	"fmt"
	"math"
	"strconv"
)

// Palette is the categorical palette of channels and actions: the eight
// colours of Okabe & Ito, "Color Universal Design" (2008), chosen to stay
// distinguishable under the common forms of colour blindness. Yellow, the
// weakest on white, comes last. Beyond eight categories the colours repeat and
// lines add a dash pattern.
var Palette = []string{
	"#0072B2", // blue
	"#E69F00", // orange
	"#009E73", // bluish green
	"#D55E00", // vermillion
	"#CC79A7", // reddish purple
	"#56B4E9", // sky blue
	"#000000", // black
	"#F0E442", // yellow
}

// Fixed colours of the page's other marks.
const (
	colorBackground = "#ffffff"
	colorText       = "#1a1a1a"
	colorMuted      = "#5c5c5c" // 6.6:1 on white (WCAG 2 contrast)
	colorGrid       = "#e4e4e4"
	colorAxis       = "#7a7a7a"
	colorEmpty      = "#f4f4f4"
	colorOther      = "#9a9a9a" // folded channels ("other")
	colorBand       = "#f6f7f9" // every other row of the dot plot
	colorSpread     = "#b8bec7" // dot plot: smallest to largest model value
	colorNext       = "#0072B2" // next-step table: share going on to an action
	colorExit       = "#D55E00" // next-step table: share ending the session
	colorRate       = "#56B4E9" // abandonment rate per interval
	colorStatistic  = "#0072B2" // EWMA statistic
	colorLimit      = "#D55E00" // control limit
	colorAlert      = "#D55E00" // alert periods (drawn translucent)
	colorContinue   = "#0072B2" // funnel: sessions that went on
	colorDrop       = "#E69F00" // funnel: sessions that left at the step
)

// dashes are the stroke patterns of lines beyond the palette's length.
var dashes = []string{"", "6 3", "2 3", "8 3 2 3"}

// seriesColor is the palette colour of the i-th series, unless given.
func seriesColor(given string, i int) string {
	if given != "" {
		return given
	}
	return Palette[i%len(Palette)]
}

// seriesDash is the dash pattern of the i-th line ("" = solid).
func seriesDash(i int) string { return dashes[(i/len(Palette))%len(dashes)] }

// heatRamp is the sequential scale of the heatmap: ColorBrewer "Blues"
// (Brewer, colorbrewer2.org, 5-class), light to dark: one hue, lightness
// falling monotonically, so order reads without relying on hue.
var heatRamp = [][3]float64{
	{0xef, 0xf3, 0xff},
	{0xbd, 0xd7, 0xe7},
	{0x6b, 0xae, 0xd6},
	{0x31, 0x82, 0xbd},
	{0x08, 0x51, 0x9c},
}

// heatColor maps x in [0, 1] onto heatRamp, interpolating linearly in sRGB
// between its stops.
func heatColor(x float64) string {
	if math.IsNaN(x) || x < 0 {
		x = 0
	}
	if x > 1 {
		x = 1
	}
	pos := x * float64(len(heatRamp)-1)
	i := int(math.Floor(pos))
	if i >= len(heatRamp)-1 {
		i = len(heatRamp) - 2
	}
	f := pos - float64(i)
	var c [3]float64
	for k := range c {
		c[k] = heatRamp[i][k] + f*(heatRamp[i+1][k]-heatRamp[i][k])
	}
	return fmt.Sprintf("#%02x%02x%02x", int(math.Round(c[0])), int(math.Round(c[1])), int(math.Round(c[2])))
}

// relativeLuminance of an sRGB colour "#rrggbb" as defined by WCAG 2.x
// (W3C, "relative luminance"): channels linearised with
// c ≤ 0.04045 ? c/12.92 : ((c+0.055)/1.055)^2.4, then
// L = 0.2126 R + 0.7152 G + 0.0722 B.
func relativeLuminance(hex string) float64 {
	if len(hex) != 7 || hex[0] != '#' {
		return 0
	}
	lin := func(s string) float64 {
		v, err := strconv.ParseUint(s, 16, 8)
		if err != nil {
			return 0
		}
		c := float64(v) / 255
		if c <= 0.04045 {
			return c / 12.92
		}
		return math.Pow((c+0.055)/1.055, 2.4)
	}
	return 0.2126*lin(hex[1:3]) + 0.7152*lin(hex[3:5]) + 0.0722*lin(hex[5:7])
}

// contrast is the WCAG 2.x contrast ratio (L1 + 0.05) / (L2 + 0.05) of two
// colours, L1 the lighter.
func contrast(a, b string) float64 {
	la, lb := relativeLuminance(a), relativeLuminance(b)
	if la < lb {
		la, lb = lb, la
	}
	return (la + 0.05) / (lb + 0.05)
}

// inkOn picks the text colour, black or white, with the higher contrast on
// the fill. With pure black and white one of the two always reaches 4.5:1
// (WCAG AA): white does for L ≤ 0.183, black for L ≥ 0.175.
func inkOn(fill string) string {
	if contrast(fill, "#000000") >= contrast(fill, "#ffffff") {
		return "#000000"
	}
	return "#ffffff"
}

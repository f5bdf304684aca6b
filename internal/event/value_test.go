package event

import (
	"fmt"
	"math"
	"math/big"
	"math/rand/v2"
	"strconv"
	"strings"
	"testing"
)

// exactMicroUnits is the reference conversion: the exact rational value of
// the decimal text (math/big), times 10^6, rounded half away from zero.
// ok is false outside [0, 1e12] (negative zero counts as 0).
func exactMicroUnits(t *testing.T, text string) (int64, bool) {
	t.Helper()
	r, ok := new(big.Rat).SetString(text)
	if !ok {
		t.Fatalf("big.Rat cannot read %q", text)
	}
	if r.Sign() < 0 || r.Cmp(big.NewRat(1e12, 1)) > 0 {
		return 0, false
	}
	scaled := new(big.Rat).Mul(r, big.NewRat(ValueScale, 1))
	q, m := new(big.Int).QuoRem(scaled.Num(), scaled.Denom(), new(big.Int))
	if new(big.Int).Lsh(m, 1).Cmp(scaled.Denom()) >= 0 { // remainder ≥ half: away from zero
		q.Add(q, big.NewInt(1))
	}
	return q.Int64(), true
}

// randomNumber writes a random JSON number: a mantissa of 1-25 digits with
// the point anywhere, an exponent of -30..30 half the time, a sign now and then.
func randomNumber(rng *rand.Rand) string {
	digits := make([]byte, 1+rng.IntN(25))
	for i := range digits {
		digits[i] = byte('0' + rng.IntN(10))
	}
	if rng.IntN(3) > 0 {
		digits[0] = byte('1' + rng.IntN(9))
	}
	text := string(digits)
	if len(digits) > 1 && digits[0] == '0' {
		text = "0." + text[1:]
	} else if p := rng.IntN(len(digits) + 1); p > 0 && p < len(digits) {
		text = text[:p] + "." + text[p:]
	}
	if rng.IntN(2) == 0 {
		text += []string{"e", "E", "e+", "e-"}[rng.IntN(4)] + strconv.Itoa(rng.IntN(31))
	}
	if rng.IntN(10) == 0 {
		text = "-" + text
	}
	return text
}

// TestMicroUnitsExact compares microUnits with the exact rational reference
// on random decimal texts and on hand-picked edges.
func TestMicroUnitsExact(t *testing.T) {
	cases := []string{"0", "-0", "0.0", "0e5", "1", "1e12", "1000000000000", "1000000000000.0000001",
		"999999999999.9999995", "999999999999.99999949", "0.0000005", "0.00000049999999999999",
		"0.0000015", "2.5e-6", "1e-7", "5e-7", "12.345e-3", "4478354144.302263", "0.1", "123456789.123456789"}
	rng := rand.New(rand.NewPCG(17, 19))
	n := 20000
	if testing.Short() {
		n = 2000
	}
	for range n {
		cases = append(cases, randomNumber(rng))
	}
	for _, text := range cases {
		got, gotOK := microUnits([]byte(text))
		want, wantOK := exactMicroUnits(t, text)
		if gotOK != wantOK || (wantOK && got != want) {
			t.Fatalf("microUnits(%s) = %d, %v; exact reference %d, %v", text, got, gotOK, want, wantOK)
		}
	}
}

// TestMicroUnitsMatchFloat checks the brief's formula int64(math.Round(v*1e6))
// on the float64 of the text where float64 is exact enough: up to six
// decimals and below 2^51 micro-units (about 2.25e9), where the float error of
// v*1e6 stays below 0.5. (At 4405498048.46199 the float product already
// rounds to one micro-unit too many.)
func TestMicroUnitsMatchFloat(t *testing.T) {
	rng := rand.New(rand.NewPCG(23, 29))
	for range 20000 {
		units := rng.Int64N(2_250_000_000)
		decimals := rng.IntN(7)
		frac := rng.Int64N(int64(math.Pow10(decimals)))
		text := strconv.FormatInt(units, 10)
		if decimals > 0 {
			text += "." + fmt.Sprintf("%0*d", decimals, frac)
		}
		v, err := strconv.ParseFloat(text, 64)
		if err != nil {
			t.Fatal(err)
		}
		want := int64(math.Round(v * 1e6))
		got, ok := microUnits([]byte(text))
		if !ok || got != want {
			t.Fatalf("microUnits(%s) = %d, %v; math.Round(v*1e6) = %d", text, got, ok, want)
		}
	}
}

// TestMicroUnitsLongText checks texts far longer than any float: 60 000
// digits of mantissa or an exponent of twenty digits.
func TestMicroUnitsLongText(t *testing.T) {
	tests := []struct {
		text   string
		want   int64
		wantOK bool
	}{
		{"0." + strings.Repeat("0", 60000) + "1", 0, true},
		{"1" + strings.Repeat("0", 60000), 0, false},
		{"1" + strings.Repeat("0", 60000) + "e-60000", 1_000_000, true},
		{"0.000000" + strings.Repeat("9", 60000), 1, true},
		{"1e99999999999999999999", 0, false},
		{"1e-99999999999999999999", 0, true},
		{"0e99999999999999999999", 0, true},
	}
	for _, tt := range tests {
		got, ok := microUnits([]byte(tt.text))
		if got != tt.want || ok != tt.wantOK {
			t.Errorf("microUnits(%.40s…) = %d, %v; want %d, %v", tt.text, got, ok, tt.want, tt.wantOK)
		}
	}
}

package shop_test

import (
	"bytes"
	"fmt"

	"github.com/touchledger/touchledger/demo/shop"
)

func ExampleGenerate() {
	c := shop.DefaultConfig()
	c.Days, c.Visitors, c.ShiftDay, c.IncidentDay = 7, 2000, 3, 4
	var out bytes.Buffer
	st, err := shop.Generate(&out, c)
	if err != nil {
		fmt.Println(err)
		return
	}
	first, _, _ := bytes.Cut(out.Bytes(), []byte("\n"))
	fmt.Printf("%s\n%d events, %d touches, %d purchases\n", first, st.Events, st.Touches, st.Conversions)
	// Output:
	// {"id":"v0000590-5","user":"v0000590","time":"2026-10-01T00:01:07.543Z","kind":"touch","channel":"review_partners","campaign":"kettle-roundup","interaction":"click"}
	// 8925 events, 2262 touches, 191 purchases
}

func ExampleTrueIncremental() {
	c := shop.DefaultConfig()
	c.Days, c.Visitors, c.ShiftDay, c.IncidentDay = 7, 2000, 3, 4
	perChannel, total, err := shop.TrueIncremental(c)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, name := range shop.Channels() {
		fmt.Printf("%-16s %3.0f\n", name, perChannel[name])
	}
	fmt.Printf("%-16s %3.0f\n", "total", total)
	// Output:
	// newsletter         3
	// search_ads         2
	// social_ads        25
	// review_partners    4
	// coupon_partners    0
	// display_ads        1
	// podcast_spots     10
	// total             45
}

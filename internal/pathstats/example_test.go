package pathstats_test

import (
	"fmt"

	"github.com/touchledger/touchledger/internal/pathstats"
)

// Example 1 of docs/references.md §6: three counters over a b a c a b d a b e.
func ExampleTopK() {
	top := pathstats.NewTopK(3)
	for _, item := range []string{"a", "b", "a", "c", "a", "b", "d", "a", "b", "e"} {
		top.Observe(item, 1)
	}
	for _, it := range top.Items() {
		fmt.Printf("%s count %d, true count in [%d, %d]\n", it.Key, it.Count, it.Count-it.Error, it.Count)
	}
	fmt.Println("unlisted items occurred at most", top.UnlistedMax(), "times of", top.Total())
	// Output:
	// a count 4, true count in [4, 4]
	// b count 3, true count in [3, 3]
	// e count 3, true count in [1, 3]
	// unlisted items occurred at most 3 times of 10
}

func ExamplePathKey() {
	session := []string{"home", "product_view", "product_view", "basket_add", "product_view", "checkout", "order"}
	fmt.Println(pathstats.PathKey(session, 0))
	fmt.Println(pathstats.PathKey(session, 4))
	// Output:
	// home → product_view → basket_add → product_view → checkout → order
	// home → product_view → basket_add → … → order
}

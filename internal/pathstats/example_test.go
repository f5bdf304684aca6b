package pathstats_test

import (
	"fmt"

	"github.com/touchledger/touchledger/internal/pathstats"
)

func ExamplePathKey() {
	session := []string{"home", "product_view", "product_view", "basket_add", "product_view", "checkout", "order"}
	fmt.Println(pathstats.PathKey(session, 0))
	fmt.Println(pathstats.PathKey(session, 4))
	// Output:
	// home → product_view → basket_add → product_view → checkout → order
	// home → product_view → basket_add → … → order
}

package payments_test

import (
	"fmt"
	"os"

	"github.com/quernlab/quern/demo/payments"
)

func ExampleGenerate() {
	tb := payments.Generate(payments.Config{History: 3, Holdout: 1, Seed: 1})
	fmt.Println(len(tb.History), "payments of history,", len(tb.Holdout), "in the hold-out month")
	if err := payments.Write(os.Stdout, tb.History[:1], false); err != nil {
		fmt.Println(err)
	}
	// Output:
	// 3 payments of history, 1 in the hold-out month
	// payment_id,time,merchant_category,channel,country,amount_eur,card_present,device_id
	// pay-0000000,2026-01-01T19:41:18Z,restaurant,chip,FR,12.21,yes,
}

package alert_test

import (
	"fmt"
	"time"

	"github.com/touchledger/touchledger/internal/alert"
)

// The spike example of docs/references.md §5: 400 sessions per 5-minute
// interval against a fixed baseline of 10 %; the chart first crosses its
// limit in the sixth interval.
func ExampleDetect() {
	start := time.Date(2025, 3, 1, 9, 0, 0, 0, time.UTC)
	var intervals []alert.Interval
	for i, abandons := range []int64{40, 44, 36, 48, 56, 64} {
		intervals = append(intervals, alert.Interval{
			Start: start.Add(time.Duration(i) * 5 * time.Minute), Sessions: 400, Abandons: abandons,
		})
	}
	p := alert.Params{Lambda: 0.2, L: 3, MinSessions: 50, Target: 0.10, CloseAfter: 3}
	points, alerts, err := alert.Detect(intervals, p)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, pt := range points {
		fmt.Printf("%s rate %.2f z %.4f ucl %.4f alerting %v\n",
			pt.Start.Format("15:04"), pt.Rate, pt.Statistic, pt.UCL, pt.Alerting)
	}
	for _, a := range alerts {
		fmt.Printf("alert opened %s: rate %.2f, baseline %.2f, limit %.4f, open %v\n",
			a.Opened.Format("15:04"), a.Rate, a.Baseline, a.Limit, a.Closed.IsZero())
	}
	// Output:
	// 09:00 rate 0.10 z 0.1000 ucl 0.1090 alerting false
	// 09:05 rate 0.11 z 0.1020 ucl 0.1115 alerting false
	// 09:10 rate 0.09 z 0.0996 ucl 0.1129 alerting false
	// 09:15 rate 0.12 z 0.1037 ucl 0.1137 alerting false
	// 09:20 rate 0.14 z 0.1109 ucl 0.1142 alerting false
	// 09:25 rate 0.16 z 0.1208 ucl 0.1145 alerting true
	// alert opened 09:25: rate 0.16, baseline 0.10, limit 0.1145, open true
}

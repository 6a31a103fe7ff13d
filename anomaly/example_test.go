package anomaly_test

import (
	"fmt"

	"github.com/quernlab/quern/anomaly"
)

func ExampleCalibrate() {
	// Reconstruction errors of 99 held-out normal records.
	scores := make([]float64, 99)
	for i := range scores {
		scores[i] = float64(i) / 100
	}
	th, _ := anomaly.Calibrate(scores, anomaly.Config{FalseAlarm: 0.05})
	fmt.Printf("threshold %.2f, expected false alarms %.1f%%\n", th.Value, 100*th.ExpectedFalseAlarm)
	fmt.Println(th.Flag(0.99), th.Flag(0.5))
	// Output:
	// threshold 0.94, expected false alarms 5.0%
	// true false
}

package influx_test

import (
	"fmt"
	"time"

	"drainsight/ingest/influx"
)

// A backfill pulls history in bounded windows; each window is one query and
// the caller commits its checkpoint after each.
func ExampleWindows() {
	start := time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC).UnixNano()
	stop := start + (60 * time.Hour).Nanoseconds()
	for _, w := range influx.Windows(start, stop, 24*time.Hour) {
		fmt.Println(time.Unix(0, w[0]).UTC().Format(time.RFC3339), time.Unix(0, w[1]).UTC().Format(time.RFC3339))
	}
	// Output:
	// 2024-03-01T00:00:00Z 2024-03-02T00:00:00Z
	// 2024-03-02T00:00:00Z 2024-03-03T00:00:00Z
	// 2024-03-03T00:00:00Z 2024-03-03T12:00:00Z
}

func ExampleConn_String() {
	c := influx.Conn{URL: "http://127.0.0.1:8086", Bucket: "tanks/autogen", Token: "admin:pass"}
	fmt.Println(c)
	// Output:
	// influx url=http://127.0.0.1:8086 org="" bucket="tanks/autogen" token=set (redacted)
}

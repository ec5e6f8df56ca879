package csvsource_test

import (
	"context"
	"fmt"
	"io"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

func ExampleNew() {
	const data = `time,flow,site
1,2.5,north
2,NA,south
3,"4.0",north
`
	src, err := csvsource.New("rows.csv", func() (io.ReadCloser, error) {
		return io.NopCloser(strings.NewReader(data)), nil
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(src.Columns())

	need := fit.Need{Numeric: []string{"flow"}, Text: []string{"site"}}
	err = src.Scan(context.Background(), need, func(b *fit.Block) error {
		for i := range b.Rows {
			fmt.Printf("line %d: flow %v at %s\n", b.Line[i], b.Numeric["flow"][i], b.Text["site"][i])
		}
		return nil
	})
	if err != nil {
		fmt.Println(err)
	}
	// Output:
	// [time flow site]
	// line 2: flow 2.5 at north
	// line 3: flow NaN at south
	// line 4: flow 4 at north
}

func ExampleError() {
	src, err := csvsource.New("rows.csv", func() (io.ReadCloser, error) {
		return io.NopCloser(strings.NewReader("time,flow\n1,2.5\n2,abc\n")), nil
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	err = src.Scan(context.Background(), fit.Need{Numeric: []string{"flow"}}, func(*fit.Block) error { return nil })
	fmt.Println(err)
	// Output:
	// rows.csv line 3, column "flow": "abc" is not a number (leave the cell empty or write NA for a missing value)
}

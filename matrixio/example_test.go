package matrixio_test

import (
	"fmt"
	"log"
	"strings"

	"github.com/residua/residua/matrixio"
)

// A heat-sink block made of three cells: the conduction matrix is stored as
// its lower triangle, and the reader expands it to both triangles.
func ExampleReadMatrix() {
	const text = `%%MatrixMarket matrix coordinate real symmetric
% heat-sink block, three cells in a row
3 3 5
1 1 2
2 1 -1
2 2 2
3 2 -1
3 3 1
`
	a, info, err := matrixio.ReadMatrix(strings.NewReader(text), nil)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("%d×%d, %d entries in the file, %d stored\n", info.Rows, info.Cols, info.Entries, info.Nonzeros)
	for i := 0; i < a.Rows; i++ {
		var row []string
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			row = append(row, fmt.Sprintf("a(%d,%d) = %g", i+1, a.ColIdx[p]+1, a.Val[p]))
		}
		fmt.Println(strings.Join(row, "  "))
	}

	// A defect is reported with its line and what was expected.
	_, _, err = matrixio.ReadMatrix(strings.NewReader(strings.Replace(text, "3 2 -1", "3 4 -1", 1)), nil)
	fmt.Println(err)
	// Output:
	// 3×3, 5 entries in the file, 7 stored
	// a(1,1) = 2  a(1,2) = -1
	// a(2,1) = -1  a(2,2) = 2  a(2,3) = -1
	// a(3,2) = -1  a(3,3) = 1
	// <input>:7:3: index out of range: expected a column index in 1..3, found 4
}

package modelfile_test

import (
	"bytes"
	"encoding/json"
	"fmt"

	"github.com/quernlab/quern/modelfile"
)

func ExampleDecode() {
	f := &modelfile.File{Kind: "ae", Meta: json.RawMessage(`{"note":"example"}`),
		Tensors: []modelfile.Tensor{{Name: "encoder.0.bias", Rows: 1, Cols: 2, F32: []float32{0.5, -1}}}}
	var b bytes.Buffer
	if err := modelfile.Encode(&b, f); err != nil {
		fmt.Println(err)
		return
	}
	back, err := modelfile.Decode(b.Bytes(), "example.qm")
	fmt.Println(back.Kind, back.Tensors[0].Name, back.Tensors[0].F32, err)

	raw := b.Bytes()
	raw[len(raw)/2] ^= 1 // flip one bit
	_, err = modelfile.Decode(raw, "example.qm")
	fmt.Println(err)
	// Output:
	// ae encoder.0.bias [0.5 -1] <nil>
	// modelfile: example.qm: corrupt at byte 73: checksum mismatch (truncated or altered)
}

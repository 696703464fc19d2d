package catalog_test

import (
	"context"
	"fmt"
	"os"
	"path/filepath"

	"github.com/scanfold/scanfold/catalog"
)

func Example() {
	dir, _ := os.MkdirTemp("", "catalog-example")
	defer os.RemoveAll(dir)
	s, err := catalog.Open(filepath.Join(dir, "scanfold-catalog"), catalog.Options{})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer s.Close()

	rev, err := s.File(context.Background(), catalog.Filing{
		Part:  "bushing",
		Blobs: map[string]catalog.BlobSource{"report.json": {Data: []byte("hello")}},
		Metadata: catalog.Metadata{
			Verdict: catalog.Rescan,
			Reasons: []string{"no mesh: the sweep saw too little of the part"},
		},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(catalog.FormatRef(rev.Part, rev.Number), rev.Verdict)
	// SHA-256 of "hello", a widely published test value.
	fmt.Println(rev.Blobs["report.json"].SHA256)

	name, n, _ := catalog.ParseRef("bushing@1")
	r, _ := s.Show(name, n)
	fmt.Println(r.Reasons[0])
	list, _ := s.List()
	fmt.Println(list[0].Name, list[0].Latest, list[0].Revisions, list[0].Verdict)
	// Output:
	// bushing@1 rescan
	// 2cf24dba5fb0a30e26e83b2ac5b9e29e1b161e5c1fa7425e73043362938b9824
	// no mesh: the sweep saw too little of the part
	// bushing 1 1 rescan
}

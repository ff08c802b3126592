package main

import (
	"fmt"
	"os"

	bolt "go.etcd.io/bbolt"
)

func main() {
	db, err := bolt.Open(os.Args[1], 0o600, &bolt.Options{ReadOnly: true})
	if err != nil {
		panic(err)
	}
	defer db.Close()
	var n float64
	fmt.Sscan(os.Args[2], &n)
	db.View(func(tx *bolt.Tx) error {
		return tx.ForEach(func(name []byte, b *bolt.Bucket) error {
			st := b.Stats()
			alloc := st.BranchAlloc + st.LeafAlloc
			fmt.Printf("%-16s alloc %10d (%.2f B/r) inuse %10d keys %d\n", name, alloc, float64(alloc)/n, st.BranchInuse+st.LeafInuse, st.KeyN)
			return nil
		})
	})
}

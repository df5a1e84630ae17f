package store_test

import (
	"fmt"

	"padline/store"
)

func ExampleHashConfig() {
	// FIPS 180-2, Appendix B.1: the SHA-256 of "abc".
	fmt.Println(store.HashConfig([]byte("abc")))
	// Output: ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad
}

package phantom

import (
	"crypto/sha256"
	"fmt"
	"math/big"
	"math/rand/v2"
)

// uidFrom returns a UID under the 2.25 root: "2.25." followed by the
// decimal of a 128-bit integer (PS3.5 B.2), here the first 16 bytes of the
// SHA-256 of the parts, so UIDs are deterministic per seed and study.
func uidFrom(parts ...any) string {
	h := sha256.Sum256([]byte(fmt.Sprintf("%#v", parts)))
	n := new(big.Int).SetBytes(h[:16])
	if n.Sign() == 0 {
		n.SetInt64(1) // a component may not be a lone leading zero
	}
	return "2.25." + n.String()
}

// rngFor returns a generator seeded from the parts, so each study (and
// each purpose within it) draws an independent, reproducible stream.
func rngFor(parts ...any) *rand.Rand {
	h := sha256.Sum256([]byte(fmt.Sprintf("%#v", parts)))
	var s1, s2 uint64
	for i := 0; i < 8; i++ {
		s1 = s1<<8 | uint64(h[i])
		s2 = s2<<8 | uint64(h[8+i])
	}
	return rand.New(rand.NewPCG(s1, s2))
}

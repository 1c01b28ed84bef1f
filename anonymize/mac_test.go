package anonymize

import (
	"bytes"
	"encoding/hex"
	"testing"
)

// TestMACRFC4231 checks the package's HMAC-SHA256 primitive (the one the
// Pseudonymizer uses) against the HMAC-SHA-256 values of RFC 4231 section 4.
func TestMACRFC4231(t *testing.T) {
	tests := []struct {
		name    string
		key     []byte
		data    []byte
		want    string // hex; for test case 5 the RFC gives only the first 128 bits
		truncTo int    // bytes compared; 0 means all 32
	}{
		{ // RFC 4231 section 4.2, test case 1
			name: "case 1",
			key:  bytes.Repeat([]byte{0x0b}, 20),
			data: []byte("Hi There"),
			want: "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7",
		},
		{ // RFC 4231 section 4.3, test case 2 (key shorter than the output)
			name: "case 2",
			key:  []byte("Jefe"),
			data: []byte("what do ya want for nothing?"),
			want: "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843",
		},
		{ // RFC 4231 section 4.4, test case 3 (50 bytes of 0xdd)
			name: "case 3",
			key:  bytes.Repeat([]byte{0xaa}, 20),
			data: bytes.Repeat([]byte{0xdd}, 50),
			want: "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe",
		},
		{ // RFC 4231 section 4.5, test case 4 (key 0x01..0x19)
			name: "case 4",
			key:  seq(0x01, 0x19),
			data: bytes.Repeat([]byte{0xcd}, 50),
			want: "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b",
		},
		{ // RFC 4231 section 4.6, test case 5 (output truncated to 128 bits)
			name:    "case 5",
			key:     bytes.Repeat([]byte{0x0c}, 20),
			data:    []byte("Test With Truncation"),
			want:    "a3b6167473100ee06e0c796c2955552b",
			truncTo: 16,
		},
		{ // RFC 4231 section 4.7, test case 6 (131-byte key, hashed first)
			name: "case 6",
			key:  bytes.Repeat([]byte{0xaa}, 131),
			data: []byte("Test Using Larger Than Block-Size Key - Hash Key First"),
			want: "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54",
		},
		{ // RFC 4231 section 4.8, test case 7 (131-byte key and long data)
			name: "case 7",
			key:  bytes.Repeat([]byte{0xaa}, 131),
			data: []byte("This is a test using a larger than block-size key and a larger than block-size data." +
				" The key needs to be hashed before being used by the HMAC algorithm."),
			want: "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2",
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			m := newMAC(tt.key)
			// Twice through the same state: the second call checks Reset.
			for round := 0; round < 2; round++ {
				got := m.compute(tt.data)
				if tt.truncTo > 0 {
					got = got[:tt.truncTo]
				}
				if h := hex.EncodeToString(got); h != tt.want {
					t.Fatalf("round %d: got %s, want %s", round, h, tt.want)
				}
			}
			one := hmacSHA256(tt.key, tt.data)
			if h := hex.EncodeToString(one[:]); h[:len(tt.want)] != tt.want {
				t.Fatalf("one-shot: got %s, want %s", h, tt.want)
			}
		})
	}
}

func seq(from, to byte) []byte {
	var b []byte
	for c := from; c <= to; c++ {
		b = append(b, c)
	}
	return b
}

package dbio

import (
	"bytes"
	"strings"
	"testing"
)

func TestKeys(t *testing.T) {
	var k Keys
	in := [][]byte{[]byte("a"), {}, []byte("longer key"), {0, 1, 2}}
	for round := range 2 { // the second round reuses the storage
		k.Reset()
		if k.Len() != 0 {
			t.Fatalf("round %d: Len after Reset = %d", round, k.Len())
		}
		for _, b := range in {
			k.Append(b)
		}
		if k.Len() != len(in) {
			t.Fatalf("round %d: Len = %d, want %d", round, k.Len(), len(in))
		}
		for i, b := range in {
			if got := k.At(i); !bytes.Equal(got, b) {
				t.Errorf("round %d: At(%d) = %q, want %q", round, i, got, b)
			}
		}
	}
	// Appending to a key must not overwrite the next one.
	first := k.At(0)
	_ = append(first, 'X')
	if got := k.At(1); len(got) != 0 {
		t.Errorf("key 1 changed to %q by an append to key 0", got)
	}
	if got := k.At(2); string(got) != "longer key" {
		t.Errorf("key 2 = %q after an append to key 0", got)
	}
	// Append copies.
	src := []byte("src")
	k.Append(src)
	src[0] = 'X'
	if got := k.At(k.Len() - 1); string(got) != "src" {
		t.Errorf("Append kept a reference: key = %q", got)
	}
}

func TestRenderKey(t *testing.T) {
	cases := []struct {
		name string
		oid  uint32
		in   []byte
		want string
	}{
		{"int2", oidInt2, be16(-12), "-12"},
		{"int4", oidInt4, be32(98817), "98817"},
		{"int8", oidInt8, be64(1 << 40), "1099511627776"},
		{"int8 negative", oidInt8, be64(^uint64(0)), "-1"},
		{"int4 of wrong length", oidInt4, []byte{1, 2, 3}, `\x010203`},
		{"text", oidText, []byte("north-7"), `"north-7"`},
		{"varchar with quote and newline", oidVarchar, []byte("a\"b\n"), `"a\"b\n"`},
		{"bpchar", oidBpchar, []byte("ab  "), `"ab  "`},
		{"name", oidName, []byte("pg"), `"pg"`},
		{"empty text", oidText, []byte{}, `""`},
		{"long text cut", oidText, []byte(strings.Repeat("x", 70)), `"` + strings.Repeat("x", 64) + `"...`},
		{"uuid", oidUUID, []byte{0x01, 0x23, 0x45, 0x67, 0x89, 0xab, 0xcd, 0xef, 0x01, 0x23, 0x45, 0x67, 0x89, 0xab, 0xcd, 0xef}, "01234567-89ab-cdef-0123-456789abcdef"},
		{"uuid of wrong length", oidUUID, []byte{0xff}, `\xff`},
		{"other type", 1700, []byte{0, 1, 0, 0}, `\x00010000`},
		{"unknown type", 0, []byte{}, `\x`},
		{"long hex cut", 17, bytes.Repeat([]byte{0xab}, 65), `\x` + strings.Repeat("ab", 64) + "..."},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := RenderKey(c.oid, c.in); got != c.want {
				t.Errorf("RenderKey = %s, want %s", got, c.want)
			}
		})
	}
}

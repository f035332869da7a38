package dbio

import (
	"encoding/binary"
	"encoding/hex"
	"strconv"
)

// Keys is a list of row keys kept as the server sent them: key i is
// Data[start(i):End[i]], where start(0) = 0 and start(i) = End[i-1], in
// PostgreSQL's binary format for the key's type. Keys are never NULL.
//
// Keeping the bytes rather than a decoded value lets a key of any type
// (bigint, text, uuid, a composite) be written back verbatim with
// Encoder.Raw; it costs one copy of the key bytes and one int per row.
type Keys struct {
	Data []byte
	End  []int
}

// Len is the number of keys.
func (k *Keys) Len() int { return len(k.End) }

// At returns key i without copying; the slice's capacity ends with it, so
// appending to it cannot overwrite the next key.
func (k *Keys) At(i int) []byte {
	start := 0
	if i > 0 {
		start = k.End[i-1]
	}
	end := k.End[i]
	if k.Data == nil {
		return []byte{} // an empty key, not NULL
	}
	return k.Data[start:end:end]
}

// Reset empties k, keeping its storage.
func (k *Keys) Reset() {
	k.Data = k.Data[:0]
	k.End = k.End[:0]
}

// Append adds a copy of b as the last key.
func (k *Keys) Append(b []byte) {
	k.Data = append(k.Data, b...)
	k.End = append(k.End, len(k.Data))
}

// Type OIDs of the built-in types that RenderKey shows as text. They are
// fixed in PostgreSQL's catalog (pg_type.dat) and never change.
const (
	oidName    = 19
	oidInt8    = 20
	oidInt2    = 21
	oidInt4    = 23
	oidText    = 25
	oidFloat8  = 701
	oidBpchar  = 1042
	oidVarchar = 1043
	oidUUID    = 2950
)

// maxRendered is the most bytes of a key that RenderKey shows; longer keys
// are cut and marked with "...".
const maxRendered = 64

// RenderKey renders a key in PostgreSQL's binary format for type typeOID as
// text for messages: integers (int2, int4, int8) in decimal, strings (text,
// varchar, bpchar, name) quoted as Go strings, a uuid in its usual 8-4-4-4-12
// form, and anything else, or a value whose length does not fit its type,
// as \x followed by hexadecimal. Strings and hex are cut after 64 bytes.
func RenderKey(typeOID uint32, b []byte) string {
	switch typeOID {
	case oidInt2:
		if len(b) == 2 {
			return strconv.FormatInt(int64(int16(binary.BigEndian.Uint16(b))), 10)
		}
	case oidInt4:
		if len(b) == 4 {
			return strconv.FormatInt(int64(int32(binary.BigEndian.Uint32(b))), 10)
		}
	case oidInt8:
		if len(b) == 8 {
			return strconv.FormatInt(int64(binary.BigEndian.Uint64(b)), 10)
		}
	case oidText, oidVarchar, oidBpchar, oidName:
		if len(b) > maxRendered {
			return strconv.Quote(string(b[:maxRendered])) + "..."
		}
		return strconv.Quote(string(b))
	case oidUUID:
		if len(b) == 16 {
			var s [36]byte
			hex.Encode(s[0:8], b[0:4])
			s[8] = '-'
			hex.Encode(s[9:13], b[4:6])
			s[13] = '-'
			hex.Encode(s[14:18], b[6:8])
			s[18] = '-'
			hex.Encode(s[19:23], b[8:10])
			s[23] = '-'
			hex.Encode(s[24:36], b[10:16])
			return string(s[:])
		}
	}
	if len(b) > maxRendered {
		return `\x` + hex.EncodeToString(b[:maxRendered]) + "..."
	}
	return `\x` + hex.EncodeToString(b)
}

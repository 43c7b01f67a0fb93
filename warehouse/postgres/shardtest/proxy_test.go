package shardtest

import (
	"encoding/binary"
	"fmt"
	"testing"
)

// TestFrontendReadsQueries: the proxy's message reader follows a session
// opening with an SSL request, a startup message, a simple query and an
// extended-protocol Parse, whether the bytes come in one piece or one at
// a time (message layouts from the PostgreSQL manual, "Message
// Formats").
func TestFrontendReadsQueries(t *testing.T) {
	u32 := func(v int) []byte { return binary.BigEndian.AppendUint32(nil, uint32(v)) }
	var s []byte
	s = append(append(s, u32(8)...), u32(sslRequest)...)
	startup := append(u32(196608), "user\x00postgres\x00\x00"...)
	s = append(append(s, u32(4+len(startup))...), startup...)
	msg := func(typ byte, body string) {
		s = append(append(append(s, typ), u32(4+len(body))...), body...)
	}
	msg('Q', "START TRANSACTION\x00")
	msg('P', "\x00DECLARE c1 CURSOR FOR\nSELECT shard, sum(x) FROM t GROUP BY 1\x00\x00\x00")
	msg('S', "")
	want := "[START TRANSACTION DECLARE c1 CURSOR FOR\nSELECT shard, sum(x) FROM t GROUP BY 1]"
	for _, chunk := range []int{len(s), 1, 7} {
		var got []string
		f := &frontend{startup: true, record: func(q string) { got = append(got, q) }}
		for i := 0; i < len(s); i += chunk {
			f.feed(s[i:min(i+chunk, len(s))])
		}
		if fmt.Sprint(got) != want || f.broken {
			t.Errorf("chunks of %d: read %q (broken %v)", chunk, got, f.broken)
		}
	}
}

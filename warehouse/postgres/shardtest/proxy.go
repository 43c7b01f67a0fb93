package shardtest

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"net"
	"sync"
	"sync/atomic"
)

// Proxy is a TCP relay between the coordinator's foreign servers and one
// shard cluster that counts the bytes it carries each way, so that a test
// can say what one query moved over the network, and records the SQL the
// coordinator sends, so that a test can say what each shard was asked to
// compute. It relays bytes untouched; it can read the SQL because the
// foreign servers ask for no TLS (sslmode 'disable'), which also keeps
// TLS framing out of the byte counts.
type Proxy struct {
	target string
	ln     net.Listener

	// Each count is raised after a read and before the matching write,
	// so once the coordinator has the bytes of a reply (or a shard has
	// the bytes of a request) the count already holds them: a test reads
	// exact figures as soon as its query returns.
	toShard, fromShard atomic.Int64

	mu      sync.Mutex
	queries []string
	conns   map[net.Conn]struct{}
	closed  bool
	wg      sync.WaitGroup
}

// Counts are the bytes a proxy carried, per direction.
type Counts struct {
	// ToShard is what the coordinator sent (queries, parameters, FETCH
	// and COMMIT commands); FromShard what the shard sent back (rows,
	// command tags).
	ToShard, FromShard int64
}

// Total is the bytes both ways.
func (c Counts) Total() int64 { return c.ToShard + c.FromShard }

// Sub is c − d, what was carried between two readings.
func (c Counts) Sub(d Counts) Counts {
	return Counts{c.ToShard - d.ToShard, c.FromShard - d.FromShard}
}

// Add is c + d.
func (c Counts) Add(d Counts) Counts {
	return Counts{c.ToShard + d.ToShard, c.FromShard + d.FromShard}
}

// String is for t.Logf.
func (c Counts) String() string {
	return fmt.Sprintf("%d bytes (%d to the shards, %d back)", c.Total(), c.ToShard, c.FromShard)
}

// Listen starts a proxy on 127.0.0.1 at a free port that relays every
// connection to target (host:port).
func Listen(target string) (*Proxy, error) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return nil, fmt.Errorf("shard proxy for %s: listen: %w", target, err)
	}
	p := &Proxy{target: target, ln: ln, conns: map[net.Conn]struct{}{}}
	p.wg.Add(1)
	go p.serve()
	return p, nil
}

// Port is the port the proxy listens on, for the foreign server's
// options.
func (p *Proxy) Port() int { return p.ln.Addr().(*net.TCPAddr).Port }

// Counts returns the bytes carried so far.
func (p *Proxy) Counts() Counts {
	return Counts{p.toShard.Load(), p.fromShard.Load()}
}

// Close stops listening, cuts every open connection and waits for the
// relays to end.
func (p *Proxy) Close() error {
	p.mu.Lock()
	p.closed = true
	for c := range p.conns {
		c.Close()
	}
	p.mu.Unlock()
	err := p.ln.Close()
	p.wg.Wait()
	return err
}

func (p *Proxy) serve() {
	defer p.wg.Done()
	for {
		client, err := p.ln.Accept()
		if err != nil {
			return // closed
		}
		shard, err := net.Dial("tcp", p.target)
		if err != nil {
			// The coordinator sees a closed connection and reports its
			// own "could not connect to server" error naming the server.
			client.Close()
			continue
		}
		if !p.track(client, shard) {
			client.Close()
			shard.Close()
			return
		}
		p.wg.Add(2)
		req := &frontend{startup: true, record: p.record}
		go p.pipe(shard, client, &p.toShard, req.feed)
		go p.pipe(client, shard, &p.fromShard, nil)
	}
}

// track records a connection pair so that Close can cut it; false when
// the proxy is already closing.
func (p *Proxy) track(a, b net.Conn) bool {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.closed {
		return false
	}
	p.conns[a], p.conns[b] = struct{}{}, struct{}{}
	return true
}

// pipe copies src to dst, counting into n and handing each chunk to
// watch (when not nil) before it is written, and closes both ends when
// either side stops: a Postgres session ends both ways at once.
func (p *Proxy) pipe(dst, src net.Conn, n *atomic.Int64, watch func([]byte)) {
	defer p.wg.Done()
	buf := make([]byte, 32<<10)
	for {
		k, err := src.Read(buf)
		if k > 0 {
			n.Add(int64(k))
			if watch != nil {
				watch(buf[:k])
			}
			if _, werr := dst.Write(buf[:k]); werr != nil {
				break
			}
		}
		if err != nil {
			break // EOF, a reset or Close: the session is over either way
		}
	}
	src.Close()
	dst.Close()
	p.mu.Lock()
	delete(p.conns, src)
	delete(p.conns, dst)
	p.mu.Unlock()
}

// Queries returns the SQL sent to the shard so far (simple queries and
// the statements of extended-protocol Parse messages), in order.
func (p *Proxy) Queries() []string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return append([]string(nil), p.queries...)
}

func (p *Proxy) record(sql string) {
	p.mu.Lock()
	p.queries = append(p.queries, sql)
	p.mu.Unlock()
}

// Protocol codes of the untyped messages a session may begin with
// (PostgreSQL manual, "Message Formats"): after these the client sends
// its startup message, also untyped.
const (
	sslRequest    = 80877103
	gssencRequest = 80877104
)

// frontend follows the messages a client sends (PostgreSQL manual,
// "Frontend/Backend Protocol"): untyped startup messages first, then
// a type byte and an int32 length that counts itself. It records the
// text of Query ('Q') and Parse ('P') messages. On anything it cannot
// follow (TLS, say) it stops reading and lets the bytes pass.
type frontend struct {
	buf     []byte
	startup bool
	broken  bool
	record  func(string)
}

func (f *frontend) feed(b []byte) {
	if f.broken {
		return
	}
	f.buf = append(f.buf, b...)
	off := 0
	for {
		rest := f.buf[off:]
		if f.startup {
			if len(rest) < 8 {
				break
			}
			n := int(binary.BigEndian.Uint32(rest))
			if n < 8 || n > 1<<20 {
				f.broken, f.buf = true, nil
				return
			}
			if len(rest) < n {
				break
			}
			code := binary.BigEndian.Uint32(rest[4:8])
			f.startup = code == sslRequest || code == gssencRequest
			off += n
			continue
		}
		if len(rest) < 5 {
			break
		}
		n := int(binary.BigEndian.Uint32(rest[1:5]))
		if n < 4 {
			f.broken, f.buf = true, nil
			return
		}
		if len(rest) < 1+n {
			break
		}
		body := rest[5 : 1+n]
		switch rest[0] {
		case 'Q':
			f.record(cString(body))
		case 'P': // statement name, then the query, each NUL-terminated
			if i := bytes.IndexByte(body, 0); i >= 0 {
				f.record(cString(body[i+1:]))
			}
		}
		off += 1 + n
	}
	f.buf = append(f.buf[:0], f.buf[off:]...)
}

// cString is b up to its first NUL.
func cString(b []byte) string {
	if i := bytes.IndexByte(b, 0); i >= 0 {
		b = b[:i]
	}
	return string(b)
}

package shardtest

import (
	"fmt"
	"net"
	"sync"
	"sync/atomic"
)

// Proxy is a TCP relay between the coordinator's foreign servers and one
// shard cluster that counts the bytes it carries each way, so that a test
// can say what one query moved over the network. It is plain TCP: the
// Postgres protocol passes through untouched (the shards are asked for
// no SSL, as the foreign servers' sslmode is the libpq default "prefer"
// and the shard clusters have no certificate).
type Proxy struct {
	target string
	ln     net.Listener

	// Each count is raised after a read and before the matching write,
	// so once the coordinator has the bytes of a reply (or a shard has
	// the bytes of a request) the count already holds them: a test reads
	// exact figures as soon as its query returns.
	toShard, fromShard atomic.Int64

	mu     sync.Mutex
	conns  map[net.Conn]struct{}
	closed bool
	wg     sync.WaitGroup
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
		go p.pipe(shard, client, &p.toShard)
		go p.pipe(client, shard, &p.fromShard)
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

// pipe copies src to dst, counting into n, and closes both ends when
// either side stops: a Postgres session ends both ways at once.
func (p *Proxy) pipe(dst, src net.Conn, n *atomic.Int64) {
	defer p.wg.Done()
	buf := make([]byte, 32<<10)
	for {
		k, err := src.Read(buf)
		if k > 0 {
			n.Add(int64(k))
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

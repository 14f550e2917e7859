package live

import (
	"sync"
	"testing"
)

func TestHubDeliversInOrder(t *testing.T) {
	h := NewHub(16)
	a, cancelA := h.Subscribe()
	b, cancelB := h.Subscribe()
	defer cancelB()
	for i := 1; i <= 5; i++ {
		h.Publish(Event{Kind: KindProgress, Step: i})
	}
	for _, ch := range []<-chan Event{a, b} {
		for i := 1; i <= 5; i++ {
			if ev := <-ch; ev.Step != i {
				t.Fatalf("event %d has step %d", i, ev.Step)
			}
		}
	}
	cancelA()
	cancelA() // twice is allowed
	if _, ok := <-a; ok {
		t.Error("channel open after cancel")
	}
	if n := h.Subscribers(); n != 1 {
		t.Errorf("%d subscribers after one cancel, want 1", n)
	}
}

func TestHubSlowSubscriberDrops(t *testing.T) {
	tests := []struct {
		buf, sent, wantKept int
	}{
		{buf: 4, sent: 10, wantKept: 4},
		{buf: 10, sent: 10, wantKept: 10},
		{buf: 1, sent: 3, wantKept: 1},
	}
	for _, tc := range tests {
		h := NewHub(tc.buf)
		ch, cancel := h.Subscribe()
		for i := 0; i < tc.sent; i++ {
			h.Publish(Event{Step: i}) // must return although nobody reads
		}
		cancel()
		kept := 0
		for range ch {
			kept++
		}
		if kept != tc.wantKept {
			t.Errorf("buf %d: kept %d, want %d", tc.buf, kept, tc.wantKept)
		}
		if d := h.Dropped(); d != uint64(tc.sent-tc.wantKept) {
			t.Errorf("buf %d: dropped %d, want %d", tc.buf, d, tc.sent-tc.wantKept)
		}
	}
}

func TestHubConcurrent(t *testing.T) {
	// Run with -race: publishers, subscribers and cancels interleave.
	h := NewHub(8)
	var wg sync.WaitGroup
	for p := 0; p < 4; p++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := 0; i < 500; i++ {
				h.Publish(Event{Step: i})
			}
		}()
	}
	for s := 0; s < 4; s++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := 0; k < 20; k++ {
				ch, cancel := h.Subscribe()
				<-ch
				cancel()
			}
		}()
	}
	stop := make(chan struct{})
	fed := make(chan struct{})
	go func() { // keep events flowing so every subscriber's first receive returns
		defer close(fed)
		for {
			select {
			case <-stop:
				return
			default:
				h.Publish(Event{})
			}
		}
	}()
	wg.Wait()
	close(stop)
	<-fed
	if n := h.Subscribers(); n != 0 {
		t.Errorf("%d subscribers left", n)
	}
}

func BenchmarkPublishFourSubscribers(b *testing.B) {
	h := NewHub(1024)
	for i := 0; i < 4; i++ {
		ch, cancel := h.Subscribe()
		defer cancel()
		go func() {
			for range ch {
			}
		}()
	}
	ev := Event{Kind: KindSample, H: 1, B: 1}
	for b.Loop() {
		h.Publish(ev)
	}
}

package pipeline

import (
	"fmt"
	"time"

	"github.com/cespare/xxhash/v2"

	"github.com/touchledger/touchledger/internal/event"
)

// The clock guard keeps one bad event from moving event time (the
// watermark) for good. Three rules, checked in this order before an event
// enters the reorder buffer:
//
//  1. Sane years: an event before SaneFrom is rejected as bad_time, one
//     at or after SaneUntil as future.
//  2. Live (Config.Now set): an event more than MaxFuture ahead of the wall
//     clock is rejected as future.
//  3. Replay (Config.Now nil): an event more than MaxJump ahead of the
//     largest event time seen is held aside without moving the watermark.
//     It is released as soon as the largest time seen comes within MaxJump
//     of it, and confirmed together with the other held events within
//     MaxJump of its time once JumpConfirm of them are held (event time
//     really jumped: a gap in the data); one still held when the input has
//     moved JumpWindow positions past it, or when the input ends, is
//     rejected as future.
//
// Held events are listed with the buffered ones in each checkpoint's
// pending positions, so a resumed replay reads them again and decides
// exactly as an uninterrupted one.
var (
	SaneFrom  = time.Date(1970, 1, 1, 0, 0, 0, 0, time.UTC)
	SaneUntil = time.Date(2100, 1, 1, 0, 0, 0, 0, time.UTC)
)

const (
	// JumpConfirm is how many held events within MaxJump of each other
	// confirm that event time jumped.
	JumpConfirm = 8
	// JumpWindow is how many input positions a held event waits for
	// confirmation.
	JumpWindow = 4096
)

// heldEvent is an event held aside by the clock guard (rule 3).
type heldEvent struct {
	e       event.Event
	pos     uint64
	t       int64
	payload []byte
}

// insane applies rules 1 and 2; it returns the reason and message of a
// rejection, or "".
func (p *Processor) insane(t int64) (event.Reason, string) {
	switch {
	case t < SaneFrom.UnixNano():
		return event.ReasonBadTime, fmt.Sprintf("bad_time: field \"time\": %s is before %s", fmtNanos(t), SaneFrom.Format("2006-01-02"))
	case t >= SaneUntil.UnixNano():
		return event.ReasonFuture, fmt.Sprintf("future: event time %s is not before %s", fmtNanos(t), SaneUntil.Format("2006-01-02"))
	case p.cfg.Now != nil && p.cfg.MaxFuture > 0:
		if now := p.cfg.Now(); t > now.Add(p.cfg.MaxFuture).UnixNano() {
			return event.ReasonFuture, fmt.Sprintf("future: event time %s is more than %s ahead of the clock (%s)",
				fmtNanos(t), p.cfg.MaxFuture, now.UTC().Format(time.RFC3339))
		}
	}
	return "", ""
}

// suspect applies rule 3: whether an event at t is to be held aside.
func (p *Processor) suspect(t int64) bool {
	if p.cfg.Now != nil || p.cfg.MaxJump <= 0 {
		return false
	}
	ms := p.reorder.MaxSeen()
	return ms != minInt64 && t > ms+int64(p.cfg.MaxJump)
}

// hold sets an event aside; with confirm, a cluster of JumpConfirm held
// events within MaxJump of its time is admitted.
func (p *Processor) hold(pos uint64, e *event.Event, payload []byte, confirm bool) error {
	t := e.Time.UnixNano()
	p.held = append(p.held, heldEvent{e: *e, pos: pos, t: t, payload: append([]byte(nil), payload...)})
	if !confirm {
		return nil
	}
	near := 0
	for _, h := range p.held {
		if abs64(h.t-t) <= int64(p.cfg.MaxJump) {
			near++
		}
	}
	if near < JumpConfirm {
		return nil
	}
	p.log.Info("event time jumped", "to", fmtNanos(t), "from", fmtNanos(p.reorder.MaxSeen()), "confirmed_by", near)
	kept := p.held[:0]
	var admit []heldEvent
	for _, h := range p.held {
		if abs64(h.t-t) <= int64(p.cfg.MaxJump) {
			admit = append(admit, h)
		} else {
			kept = append(kept, h)
		}
	}
	p.held = kept
	for i := range admit {
		if err := p.admit(Origin{Pos: admit[i].pos}, &admit[i].e, admit[i].payload); err != nil {
			return err
		}
	}
	return nil
}

// decideHeld releases held events the clock has come near and rejects as
// future those waiting since before position cur−JumpWindow (all of them
// with end).
func (p *Processor) decideHeld(cur uint64, end bool) error {
	for len(p.held) > 0 {
		i := -1
		for j, h := range p.held {
			if !p.suspect(h.t) || end || h.pos+JumpWindow <= cur {
				i = j
				break
			}
		}
		if i < 0 {
			return nil
		}
		h := p.held[i]
		p.held = append(p.held[:i], p.held[i+1:]...)
		if p.suspect(h.t) {
			msg := fmt.Sprintf("future: event time %s is more than %s ahead of the latest event time %s and no later events confirmed it",
				fmtNanos(h.t), p.cfg.MaxJump, fmtNanos(p.reorder.MaxSeen()))
			if err := p.reject(Origin{Pos: h.pos}, event.ReasonFuture, msg, h.payload); err != nil {
				return err
			}
			continue
		}
		if err := p.admit(Origin{Pos: h.pos}, &h.e, h.payload); err != nil {
			return err
		}
	}
	return nil
}

// admit is the path of an event the clock guard let through: late (or a
// late duplicate), or into the reorder buffer.
func (p *Processor) admit(o Origin, e *event.Event, payload []byte) error {
	pos := o.Pos
	if t := e.Time.UnixNano(); p.reorder.Late(t) {
		// A late event may still be a plain duplicate of one we applied.
		c, err := p.user(e.User)
		if err != nil {
			return err
		}
		if c.u.HasSeen(xxhash.Sum64String(e.ID)) {
			p.ckpt.Counts.Duplicate++
			return nil
		}
		p.ckpt.Counts.Late++
		msg := fmt.Sprintf("late: event time %s is older than the watermark %s",
			e.Time.Format(time.RFC3339Nano), fmtNanos(p.reorder.Watermark()))
		return p.rejectRecord(o, event.ReasonLate, msg, payload)
	}
	p.reorder.Push(e, pos)
	if p.cfg.PersistPending {
		if p.cfg.Pseudonyms != nil {
			p.pendingNew[pos] = event.AppendJSON(nil, e)
		} else {
			p.pendingNew[pos] = append([]byte(nil), payload...)
		}
	}
	if t := e.Time.UnixNano(); t > p.lastEvent {
		p.lastEvent = t
	}
	return p.release()
}

// heldPositions appends the positions of held events to dst.
func (p *Processor) heldPositions(dst []uint64) []uint64 {
	for _, h := range p.held {
		dst = append(dst, h.pos)
	}
	return dst
}

func fmtNanos(t int64) string {
	if t == minInt64 {
		return "none"
	}
	return time.Unix(0, t).UTC().Format(time.RFC3339Nano)
}

func abs64(x int64) int64 {
	if x < 0 {
		return -x
	}
	return x
}

package pipeline

import (
	"os"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/privacy"
	"github.com/touchledger/touchledger/internal/sessionize"
	"github.com/touchledger/touchledger/internal/state"
)

// FromConfig builds the processor configuration from the file configuration.
func FromConfig(c config.Config) Config {
	return Config{
		Tracker: sessionize.Params{
			SessionGap:     c.SessionGap.D(),
			ClickLookback:  c.ClickLookback.D(),
			ViewLookback:   c.ViewLookback.D(),
			JourneyTimeout: c.JourneyTimeout.D(),
			DedupHorizon:   c.DedupHorizon.D(),
			Conversions:    c.GoalActions,
			Credit: credit.Params{
				HalfLife: c.HalfLife.D(),
				First:    c.PositionWeights.First,
				Middle:   c.PositionWeights.Middle,
				Last:     c.PositionWeights.Last,
				Direct:   c.DirectChannel,
			},
			MaxPath:     64,
			MaxTouches:  100,
			PathStats:   true,
			FunnelSteps: c.FunnelSteps,
			BasketStep:  c.BasketStep,
		},
		Lateness:       c.Lateness.D(),
		Currency:       c.Currency,
		Limits:         event.Limits{MaxPayload: c.Limits.MaxPayload, MaxID: c.Limits.MaxID, MaxUser: c.Limits.MaxUser, MaxName: c.Limits.MaxName},
		CacheUsers:     c.Store.CacheUsers,
		CommitEvents:   c.Store.CommitEvents,
		CommitInterval: c.Store.CommitInterval.D(),
		MaxFuture:      c.Clock.MaxFuture.D(),
		MaxJump:        c.Clock.MaxJump.D(),
	}
}

// DiskGuard builds the free-space guard of dir from the configuration's
// reserve (store.min_free_mib, store.min_free_percent), or nil when both
// are 0.
func DiskGuard(dir string, c config.Config) *state.DiskGuard {
	if c.Store.MinFreeMiB == 0 && c.Store.MinFreePercent == 0 {
		return nil
	}
	return &state.DiskGuard{Dir: dir, MinFree: uint64(c.Store.MinFreeMiB) << 20, MinFreeFraction: c.Store.MinFreePercent / 100}
}

// StoreOptions builds the store options for dir from the file configuration.
func StoreOptions(dir string, c config.Config) state.Options {
	o := state.DefaultOptions(dir)
	o.Resolutions = o.Resolutions[:0]
	for _, r := range c.Store.Resolutions {
		o.Resolutions = append(o.Resolutions, state.Resolution{Name: r.Name, Step: r.Step.D(), Retention: r.Retention.D()})
	}
	o.MemtableMiB = c.Store.MemtableMiB
	o.BlockCacheMiB = c.Store.BlockCacheMiB
	o.IndexCacheMiB = c.Store.IndexCacheMiB
	return o
}

// PseudonymsFrom loads the pseudonymisation key named by the configuration
// (privacy.key_file) or, when that is empty, by the environment variable
// privacy.KeyFileEnv. It returns nil, nil when neither is set: user ids are
// then stored as given.
func PseudonymsFrom(c config.Config) (*privacy.Pseudonymizer, error) {
	path := c.Privacy.KeyFile
	if path == "" {
		path = os.Getenv(privacy.KeyFileEnv)
	}
	if path == "" {
		return nil, nil
	}
	key, err := privacy.LoadKeyFile(path)
	if err != nil {
		return nil, err
	}
	return privacy.New(key, c.Privacy.KeyVersion)
}

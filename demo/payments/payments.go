package payments

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"strconv"
	"time"

	"github.com/quernlab/quern/internal/stream"
)

// Columns are the table's columns, in order; the hold-out file adds
// Label.
var Columns = []string{"payment_id", "time", "merchant_category", "channel", "country", "amount_eur", "card_present", "device_id"}

// Label is the hold-out file's column of the injected pattern ("" for a
// normal payment).
const Label = "pattern"

// Patterns of fraud injected in the hold-out month, as recorded in
// Payment.Pattern.
const (
	Normal = ""
	// CardTesting: tiny online payments to a digital-services merchant
	// from a country the card never pays in, at night.
	CardTesting = "card_testing"
	// Takeover: a large online electronics order in the small hours.
	Takeover = "account_takeover"
	// Cloned: a contactless grocery payment far above the contactless
	// limit the real card never exceeds.
	Cloned = "cloned_card"
	// Mismatch: an online payment recorded with the card present.
	Mismatch = "channel_mismatch"
)

// Patterns lists the injected patterns in a fixed order.
var Patterns = []string{CardTesting, Takeover, Cloned, Mismatch}

// ContactlessLimit is the most a contactless payment is for in the
// normal records, in euros.
const ContactlessLimit = 50

// Config sizes the table. Zero fields mean: 20000 payments of history,
// 5000 in the hold-out month, 3% of them fraud.
type Config struct {
	History, Holdout int
	// FraudShare is the share of hold-out payments that are fraud.
	FraudShare float64
	Seed       uint64
}

// Payment is one record. Missing cells are empty strings and a NaN
// amount.
type Payment struct {
	ID, Time, Merchant, Channel, Country string
	Amount                               float64
	CardPresent, Device                  string
	Pattern                              string
}

// Table is a generated scenario: normal history to train on and a
// hold-out month with fraud.
type Table struct {
	History, Holdout []Payment
}

type merchant struct {
	name        string
	weight      float64
	median, sd  float64 // log-normal amount: median in euros, sd of the log
	online      float64 // share paid online
	contactless float64 // share of in-person payments made contactless
	hours       [2]int  // the usual opening hours [from, to)
	abroad      float64 // share paid in another country
}

var merchants = []merchant{
	{"grocery", 30, 32, 0.6, 0.03, 0.6, [2]int{8, 21}, 0.04},
	{"fuel", 12, 55, 0.3, 0, 0.4, [2]int{6, 23}, 0.06},
	{"restaurant", 18, 28, 0.5, 0.05, 0.7, [2]int{11, 23}, 0.08},
	{"pharmacy", 6, 18, 0.6, 0.1, 0.7, [2]int{8, 20}, 0.03},
	{"clothing", 10, 60, 0.6, 0.35, 0.5, [2]int{9, 20}, 0.05},
	{"electronics", 5, 180, 0.8, 0.5, 0.2, [2]int{9, 20}, 0.04},
	{"travel", 4, 320, 0.7, 0.8, 0.2, [2]int{0, 24}, 0.35},
	{"digital_services", 15, 12, 0.7, 1, 0, [2]int{0, 24}, 0.02},
}

const home = "FR"

var neighbours = []string{"DE", "ES", "BE", "IT"}

// far are countries no normal payment is made in.
var far = []string{"US", "BR", "NG", "VN"}

// Generate builds the scenario from cfg.Seed.
func Generate(cfg Config) *Table {
	if cfg.History == 0 {
		cfg.History = 20000
	}
	if cfg.Holdout == 0 {
		cfg.Holdout = 5000
	}
	if cfg.FraudShare == 0 {
		cfg.FraudShare = 0.03
	}
	r := rand.New(rand.NewPCG(cfg.Seed, stream.Payments))
	start := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	t := &Table{}
	for i := range cfg.History {
		at := start.Add(time.Duration(float64(i) / float64(cfg.History) * 60 * 24 * float64(time.Hour)))
		t.History = append(t.History, normal(r, i, at))
	}
	month := start.Add(60 * 24 * time.Hour)
	for i := range cfg.Holdout {
		at := month.Add(time.Duration(float64(i) / float64(cfg.Holdout) * 30 * 24 * float64(time.Hour)))
		id := cfg.History + i
		if r.Float64() < cfg.FraudShare {
			t.Holdout = append(t.Holdout, fraud(r, id, at, Patterns[r.IntN(len(Patterns))]))
		} else {
			t.Holdout = append(t.Holdout, normal(r, id, at))
		}
	}
	return t
}

func pick(r *rand.Rand) *merchant {
	total := 0.0
	for _, m := range merchants {
		total += m.weight
	}
	u := r.Float64() * total
	for i := range merchants {
		if u < merchants[i].weight {
			return &merchants[i]
		}
		u -= merchants[i].weight
	}
	return &merchants[len(merchants)-1]
}

// normal draws one ordinary payment: the merchant's amount, channel,
// hours and country; contactless payments within the limit; the card
// present exactly when paid in person; a device only online; about 2%
// of amounts and 3% of online countries not recorded.
func normal(r *rand.Rand, i int, day time.Time) Payment {
	m := pick(r)
	p := Payment{ID: fmt.Sprintf("pay-%07d", i), Merchant: m.name, Country: home}
	hour := m.hours[0] + r.IntN(m.hours[1]-m.hours[0])
	at := day.Truncate(24 * time.Hour).Add(time.Duration(hour)*time.Hour + time.Duration(r.IntN(3600))*time.Second)
	p.Time = at.Format(time.RFC3339)
	amount := m.median * math.Exp(m.sd*r.NormFloat64())
	switch {
	case r.Float64() < m.online:
		p.Channel, p.CardPresent = "online", "no"
		p.Device = fmt.Sprintf("dev-%07d", r.IntN(10000000))
	case amount <= ContactlessLimit && r.Float64() < m.contactless:
		p.Channel, p.CardPresent = "contactless", "yes"
	default:
		p.Channel, p.CardPresent = "chip", "yes"
	}
	if r.Float64() < m.abroad {
		p.Country = neighbours[r.IntN(len(neighbours))]
	}
	if p.Channel == "online" && r.Float64() < 0.03 {
		p.Country = ""
	}
	p.Amount = math.Round(amount*100) / 100
	if r.Float64() < 0.02 {
		p.Amount = math.NaN()
	}
	return p
}

// fraud draws one payment of a pattern.
func fraud(r *rand.Rand, i int, day time.Time, pattern string) Payment {
	p := normal(r, i, day)
	p.Pattern = pattern
	night := func() {
		at := day.Truncate(24 * time.Hour).Add(time.Duration(1+r.IntN(4))*time.Hour + time.Duration(r.IntN(3600))*time.Second)
		p.Time = at.Format(time.RFC3339)
	}
	switch pattern {
	case CardTesting:
		p.Merchant, p.Channel, p.CardPresent = "digital_services", "online", "no"
		p.Amount = float64(50+r.IntN(150)) / 100
		p.Country = far[r.IntN(len(far))]
		p.Device = fmt.Sprintf("dev-%07d", r.IntN(10000000))
		night()
	case Takeover:
		p.Merchant, p.Channel, p.CardPresent, p.Country = "electronics", "online", "no", home
		p.Amount = math.Round(800+1700*r.Float64()) + 0.99
		p.Device = fmt.Sprintf("dev-%07d", r.IntN(10000000))
		night()
	case Cloned:
		p.Merchant, p.Channel, p.CardPresent, p.Device = "grocery", "contactless", "yes", ""
		p.Amount = math.Round(15000+25000*r.Float64()) / 100
	case Mismatch:
		p.Channel, p.CardPresent = "online", "yes"
		if p.Device == "" {
			p.Device = fmt.Sprintf("dev-%07d", r.IntN(10000000))
		}
	}
	return p
}

// Write writes payments as CSV with a header of Columns (and Label when
// withLabel is set); missing cells are empty.
func Write(w io.Writer, ps []Payment, withLabel bool) error {
	cw := csv.NewWriter(w)
	head := Columns
	if withLabel {
		head = append(append([]string(nil), Columns...), Label)
	}
	if err := cw.Write(head); err != nil {
		return err
	}
	rec := make([]string, 0, len(head))
	for _, p := range ps {
		amount := ""
		if !math.IsNaN(p.Amount) {
			amount = strconv.FormatFloat(p.Amount, 'f', 2, 64)
		}
		rec = append(rec[:0], p.ID, p.Time, p.Merchant, p.Channel, p.Country, amount, p.CardPresent, p.Device)
		if withLabel {
			rec = append(rec, p.Pattern)
		}
		if err := cw.Write(rec); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

package synth

import (
	"context"
	"fmt"
	"testing"

	"flowset/internal/site"
)

func BenchmarkGenerate(b *testing.B) {
	for _, n := range []int{100, 1000, 10000} {
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			spec := Spec{Branches: n, Arrangement: site.DirectReturn, Nested: true, Seed: 1, Noise: 1, States: 2,
				Fouled: 0.05, Free: 0.05, MisSet: 0.05, Stuck: 0.05}
			b.ReportAllocs()
			for b.Loop() {
				if _, _, err := Generate(context.Background(), spec); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

using System.Collections.Immutable;
using DriftWatch.Attribution;

namespace DriftWatch.Detection;

/// <summary>
/// The half-exchange null of the share and alignment gaps: the probe's rows are re-split between the halves at random,
/// keeping the half sizes, B times — drawn once per run from a seed and reused every epoch, so every epoch's p-values
/// answer the same question. Under no difference between the halves, a feature's gap (training minus held-out) is as
/// likely on any re-split as on the real one.
/// </summary>
/// <remarks>
/// One epoch is B sums over the re-split training rows of |score| and score × label sign per feature (one
/// (B × rows) by (rows × 2F) product written as sums); held-out sums are the totals minus them. p = (1 + #re-splits with a
/// gap ≥ the observed one) / (B + 1), one-sided (training larger). Not thread-safe.
/// </remarks>
public sealed class HalfExchangeNull
{
    private readonly int _heldOut, _training, _resplits;
    private readonly int[] _trainingRows; // B × training rows, flattened

    /// <summary>Draws the re-splits of <paramref name="heldOut"/> + <paramref name="training"/> probe rows (held-out first).</summary>
    public HalfExchangeNull(int heldOut, int training, int resplits, int seed)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(heldOut, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(training, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(resplits, 1);
        _heldOut = heldOut;
        _training = training;
        _resplits = resplits;
        int n = heldOut + training;
        _trainingRows = new int[resplits * training];
        var random = new Random(unchecked(seed * 7_368_787 + 11));
        var pool = new int[n];
        for (int b = 0; b < resplits; b++)
        {
            for (int i = 0; i < n; i++)
                pool[i] = i;
            for (int i = 0; i < training; i++)
            {
                int j = random.Next(i, n);
                (pool[i], pool[j]) = (pool[j], pool[i]);
            }
            Array.Copy(pool, 0, _trainingRows, b * training, training);
        }
    }

    /// <summary>Re-splits B.</summary>
    public int Resplits => _resplits;

    /// <summary>
    /// One-sided p-values of every feature's share gap and (when <paramref name="signs"/> is given) alignment gap in
    /// <paramref name="map"/>; the alignment array is empty without signs.
    /// </summary>
    public (ImmutableArray<double> Share, ImmutableArray<double> Alignment) PValues(AttributionMap map, ImmutableArray<double>? signs)
    {
        ArgumentNullException.ThrowIfNull(map);
        int features = map.Features, n = _heldOut + _training;
        if (map.Rows != n)
            throw new ArgumentException($"the map has {map.Rows} rows; the null was drawn for {n}", nameof(map));
        bool aligned = signs is not null;
        var abs = new double[n * features];
        var signed = aligned ? new double[n * features] : [];
        var totalAbs = new double[features];
        var totalSigned = new double[features];
        for (int r = 0; r < n; r++)
        {
            double sign = aligned ? signs!.Value[r] : 0;
            for (int f = 0; f < features; f++)
            {
                double s = map.Scores[r * features + f];
                abs[r * features + f] = Math.Abs(s);
                totalAbs[f] += Math.Abs(s);
                if (aligned)
                {
                    signed[r * features + f] = s * sign;
                    totalSigned[f] += s * sign;
                }
            }
        }
        var observedRows = Enumerable.Range(_heldOut, _training).ToArray();
        var observedShare = new double[features];
        var observedAlignment = new double[features];
        var work = new Work(features);
        Gaps(observedRows, 0, abs, signed, totalAbs, totalSigned, work, observedShare, observedAlignment);

        var shareExceeding = new int[features];
        var alignmentExceeding = new int[features];
        var gate = new object();
        Parallel.For(0, _resplits, () => (Work: new Work(features), Share: new int[features], Alignment: new int[features], Gap: new double[features], Align: new double[features]),
            (b, _, local) =>
            {
                Gaps(_trainingRows, b * _training, abs, signed, totalAbs, totalSigned, local.Work, local.Gap, local.Align);
                for (int f = 0; f < features; f++)
                {
                    if (local.Gap[f] >= observedShare[f] - 1e-12)
                        local.Share[f]++;
                    if (aligned && local.Align[f] >= observedAlignment[f] - 1e-12)
                        local.Alignment[f]++;
                }
                return local;
            },
            local =>
            {
                lock (gate)
                {
                    for (int f = 0; f < features; f++)
                    {
                        shareExceeding[f] += local.Share[f];
                        alignmentExceeding[f] += local.Alignment[f];
                    }
                }
            });
        var share = shareExceeding.Select(e => MultipleTesting.PermutationPValue(e, _resplits)).ToImmutableArray();
        var alignment = aligned
            ? alignmentExceeding.Select((e, f) => double.IsFinite(observedAlignment[f]) ? MultipleTesting.PermutationPValue(e, _resplits) : double.NaN).ToImmutableArray()
            : [];
        return (share, alignment);
    }

    private sealed class Work(int features)
    {
        public readonly double[] Abs = new double[features], Signed = new double[features];
    }

    // Share gap and alignment gap of every feature when rows[offset .. offset + training) are the training half.
    private void Gaps(int[] rows, int offset, double[] abs, double[] signed, double[] totalAbs, double[] totalSigned, Work work, double[] shareGap, double[] alignmentGap)
    {
        int features = totalAbs.Length;
        bool aligned = signed.Length > 0;
        Array.Clear(work.Abs);
        Array.Clear(work.Signed);
        for (int i = 0; i < _training; i++)
        {
            int at = rows[offset + i] * features;
            var absRow = abs.AsSpan(at, features);
            for (int f = 0; f < features; f++)
                work.Abs[f] += absRow[f];
            if (aligned)
            {
                var signedRow = signed.AsSpan(at, features);
                for (int f = 0; f < features; f++)
                    work.Signed[f] += signedRow[f];
            }
        }
        double trainingTotal = work.Abs.Sum(), heldOutTotal = totalAbs.Sum() - trainingTotal;
        for (int f = 0; f < features; f++)
        {
            double heldOutAbs = totalAbs[f] - work.Abs[f];
            shareGap[f] = (trainingTotal > 0 ? work.Abs[f] / trainingTotal : 0) - (heldOutTotal > 0 ? heldOutAbs / heldOutTotal : 0);
            if (aligned)
            {
                double t = work.Abs[f] > 0 ? work.Signed[f] / work.Abs[f] : 0;
                double h = heldOutAbs > 0 ? (totalSigned[f] - work.Signed[f]) / heldOutAbs : 0;
                alignmentGap[f] = t - h;
            }
        }
    }
}

using System.Buffers;
using System.Numerics.Tensors;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Compares a trial's model outputs with the FP32 reference outputs and reduces them to a
/// <see cref="MetricSet"/>: per output, and pooled over every output. A row is one slice along the last
/// axis (a 0-d output is one row of one value).
/// </summary>
/// <remarks>
/// Sums accumulate in double over float row results. A trial output holding NaN or infinity scores
/// as badly as possible where the metric would otherwise be undefined: relative MSE +infinity, SQNR
/// -infinity, KL +infinity, and cosine -1 for the row. Pooled SQNR sums every output's noise and
/// signal power, so a high-power output (a recurrent state) can hide a low-power one (a probability);
/// that is why budgets judge each output on its own.
/// </remarks>
public static class OutputComparer
{
    /// <summary>Reference rows whose values lie in [0, 1] and sum to 1 within this are taken as probabilities.</summary>
    internal const double ProbabilitySumTolerance = 1e-3;

    /// <summary>Floor for trial probabilities under a logarithm, so a zero where the reference is not gives a large, finite KL.</summary>
    internal const float ProbabilityEpsilon = 1e-10f;

    /// <summary>
    /// In logit space, probabilities are clamped to [eps, 1 - eps] before the logarithm, so logits stay
    /// within about +-13.8. 1e-6 is well above float32's spacing near 1 (6e-8), so 1 - eps is exact enough.
    /// </summary>
    public const float LogitEpsilon = 1e-6f;

    /// <summary>Longest stretch summed in float before the partial sum is carried in double.</summary>
    private const int ChunkLength = 4096;

    // The reference outputs are compared with hundreds of trials: their logits are computed once.
    private static readonly System.Runtime.CompilerServices.ConditionalWeakTable<float[], float[]> ReferenceLogits = new();

    /// <summary>
    /// Computes every metric per output and over all outputs. <paramref name="labels"/>, when given, are
    /// compared with the argmax of the trial's first output, whose row count must equal the label count
    /// (else accuracy is null).
    /// </summary>
    public static MetricSet Compare(
        IReadOnlyList<OutputTensor> reference,
        IReadOnlyList<OutputTensor> trial,
        IReadOnlyList<long>? labels,
        MetricSpace space = MetricSpace.Linear)
    {
        ArgumentNullException.ThrowIfNull(reference);
        ArgumentNullException.ThrowIfNull(trial);
        Validate(reference, trial);

        var pooled = default(OutputSums);
        var perOutput = new OutputMetrics[reference.Count];
        for (int o = 0; o < reference.Count; o++)
        {
            var sums = CompareOutput(reference[o], trial[o], space);
            pooled = pooled.Add(sums);
            perOutput[o] = sums.ToMetrics(reference[o].Name);
        }
        if (pooled.Rows == 0)
            throw new ArgumentException("The outputs hold no values to compare.", nameof(reference));

        var all = pooled.ToMetrics(string.Empty);
        return new MetricSet(
            RelativeMse: all.RelativeMse,
            SqnrDb: all.SqnrDb,
            Top1Agreement: all.Top1Agreement,
            KlDivergence: all.KlDivergence,
            CosineSimilarity: all.CosineSimilarity,
            Accuracy: labels is null ? null : Accuracy(trial[0], RowLength(reference[0]), labels),
            Outputs: perOutput);
    }

    /// <summary>The sums behind every metric of one output: noise and signal power, and the row metrics.</summary>
    internal static OutputSums CompareOutput(OutputTensor reference, OutputTensor trial, MetricSpace space)
    {
        var r = reference.Data;
        var t = trial.Data;
        int rowLength = RowLength(reference);
        if (rowLength == 0 || r.Length == 0) return default;

        var (noise, signal) = space == MetricSpace.Logit && InUnitInterval(r)
            ? LogitPowers(r, t, rowLength)
            : Powers(r, t);

        double klSum = 0, cosineSum = 0;
        long rows = 0, agreeing = 0;
        bool probabilities = LooksLikeProbabilities(r, rowLength);
        var scratch = ArrayPool<float>.Shared.Rent(2 * rowLength);
        try
        {
            var a = scratch.AsSpan(0, rowLength);
            var b = scratch.AsSpan(rowLength, rowLength);
            for (int start = 0; start < r.Length; start += rowLength)
            {
                var rr = r.AsSpan(start, rowLength);
                var tr = t.AsSpan(start, rowLength);
                if (TensorPrimitives.IndexOfMax<float>(rr) == TensorPrimitives.IndexOfMax<float>(tr)) agreeing++;
                klSum += probabilities ? KlOfProbabilities(rr, tr, a, b) : KlOfLogits(rr, tr, a, b);
                cosineSum += Cosine(rr, tr);
                rows++;
            }
        }
        finally
        {
            ArrayPool<float>.Shared.Return(scratch);
        }

        return new OutputSums(noise, signal, klSum, cosineSum, rows, agreeing);
    }

    /// <summary>
    /// The share (0..1) of an output's signal power (sum of squared reference values, in
    /// <paramref name="space"/>) carried by its <paramref name="top"/> strongest samples, and the number of
    /// samples; null when the output has no sample axis. When a few samples carry most of the power, the
    /// output's SQNR is decided by how well those few come through.
    /// </summary>
    public static (double Share, long Samples)? TopSampleShare(OutputTensor reference, int top, MetricSpace space = MetricSpace.Linear)
    {
        ArgumentNullException.ThrowIfNull(reference);
        if (reference.SampleAxis is not int axis || reference.Data.Length == 0) return null;
        var values = space == MetricSpace.Logit && InUnitInterval(reference.Data)
            ? LogitsOf(reference.Data, RowLength(reference))
            : reference.Data;
        var (outer, size, inner) = SampleSlicer.Split(reference.Shape, axis);
        var power = new double[size];
        for (long o = 0; o < outer; o++)
            for (long s = 0; s < size; s++)
                power[s] += TensorPrimitives.SumOfSquares<float>(values.AsSpan((int)((o * size + s) * inner), (int)inner));
        double total = power.Sum();
        if (!(total > 0)) return null;
        Array.Sort(power);
        double topPower = 0;
        for (long s = size - 1; s >= Math.Max(0, size - top); s--) topPower += power[s];
        return (topPower / total, size);
    }

    private static (double Noise, double Signal) Powers(ReadOnlySpan<float> r, ReadOnlySpan<float> t)
    {
        double noise = 0, signal = 0;
        for (int start = 0; start < r.Length; start += ChunkLength)
        {
            int n = Math.Min(ChunkLength, r.Length - start);
            var rc = r.Slice(start, n);
            double d = TensorPrimitives.Distance<float>(rc, t.Slice(start, n));
            noise += d * d;
            signal += TensorPrimitives.SumOfSquares<float>(rc);
        }
        return (noise, signal);
    }

    private static (double Noise, double Signal) LogitPowers(float[] r, float[] t, int rowLength)
    {
        var referenceLogits = ReferenceLogits.GetValue(r, values => LogitsOf(values, rowLength));
        // The trial's own values decide its logits; a trial value outside [0, 1] is clamped like any other.
        return Powers(referenceLogits, LogitsOf(t, rowLength, LooksLikeProbabilities(r, rowLength) && rowLength > 1));
    }

    /// <summary>
    /// Logits of probabilities: log(p / (1 - p)) elementwise (sigmoid outputs), or for rows that are
    /// distributions (softmax outputs, <paramref name="softmax"/>) log p minus the row's mean, which is the
    /// softmax's input up to the shift softmax ignores. p is clamped to [eps, 1 - eps] first.
    /// </summary>
    internal static float[] LogitsOf(float[] p, int rowLength, bool? softmax = null)
    {
        bool rows = softmax ?? (rowLength > 1 && LooksLikeProbabilities(p, rowLength));
        var result = new float[p.Length];
        TensorPrimitives.Clamp(p, LogitEpsilon, 1 - LogitEpsilon, result);
        if (rows)
        {
            TensorPrimitives.Log(result, result);
            for (int start = 0; start < result.Length; start += rowLength)
            {
                var row = result.AsSpan(start, rowLength);
                TensorPrimitives.Subtract(row, TensorPrimitives.Sum<float>(row) / rowLength, row);
            }
            return result;
        }

        var complement = ArrayPool<float>.Shared.Rent(result.Length);
        try
        {
            var c = complement.AsSpan(0, result.Length);
            TensorPrimitives.Subtract(1f, result, c);
            TensorPrimitives.Divide(result, c, result);
            TensorPrimitives.Log(result, result);
        }
        finally
        {
            ArrayPool<float>.Shared.Return(complement);
        }
        return result;
    }

    /// <summary>True when every value lies in [0, 1] (false for NaN): the output may be a probability.</summary>
    internal static bool InUnitInterval(float[] values) =>
        values.Length > 0 && TensorPrimitives.Min<float>(values) >= 0 && TensorPrimitives.Max<float>(values) <= 1;

    /// <summary>
    /// KL(p || q) of softmax(reference) and softmax(trial) from log-sum-exp: with d = r - t,
    /// KL = sum p d - (lse(r) - lse(t)). The maxima are subtracted before exp so large logits cannot
    /// overflow, and the log-sum-exp difference is combined in double.
    /// </summary>
    internal static double KlOfLogits(ReadOnlySpan<float> reference, ReadOnlySpan<float> trial, Span<float> p, Span<float> scratch)
    {
        float maxR = TensorPrimitives.Max(reference);
        float maxT = TensorPrimitives.Max(trial);
        TensorPrimitives.Subtract(reference, maxR, p);
        TensorPrimitives.Exp(p, p);
        double sumR = TensorPrimitives.Sum<float>(p);
        TensorPrimitives.Divide(p, (float)sumR, p);
        TensorPrimitives.Subtract(trial, maxT, scratch);
        TensorPrimitives.Exp(scratch, scratch);
        double sumT = TensorPrimitives.Sum<float>(scratch);

        TensorPrimitives.Subtract(reference, trial, scratch);
        double expectedDifference = TensorPrimitives.Dot(p, scratch);
        double lseDifference = ((double)maxR - maxT) + Math.Log(sumR) - Math.Log(sumT);
        double kl = expectedDifference - lseDifference;
        // Float rounding can take a near-zero divergence slightly below zero; KL itself never is.
        return kl < 0 ? 0 : kl;
    }

    /// <summary>KL(p || q) of rows that already are probabilities, q floored at a small epsilon.</summary>
    internal static double KlOfProbabilities(ReadOnlySpan<float> reference, ReadOnlySpan<float> trial, Span<float> logP, Span<float> logQ)
    {
        TensorPrimitives.Max(reference, ProbabilityEpsilon, logP);
        TensorPrimitives.Log(logP, logP);
        TensorPrimitives.Max(trial, ProbabilityEpsilon, logQ);
        TensorPrimitives.Log(logQ, logQ);
        TensorPrimitives.Subtract(logP, logQ, logP);
        // Terms where p is 0 vanish: p * (log eps - log q) is multiplied by the raw p of 0.
        double kl = TensorPrimitives.Dot(reference, logP);
        return kl < 0 ? 0 : kl;
    }

    /// <summary>Cosine of two rows; two zero rows are identical (1), one zero row is orthogonal (0).</summary>
    internal static double Cosine(ReadOnlySpan<float> reference, ReadOnlySpan<float> trial)
    {
        // Identical rows are exactly 1; the float kernel below would give 1 - 1e-8 or so.
        if (reference.SequenceEqual(trial)) return 1;
        double normR = TensorPrimitives.Norm(reference), normT = TensorPrimitives.Norm(trial);
        if (normR == 0 || normT == 0) return normR == normT ? 1 : 0;
        double cosine = TensorPrimitives.CosineSimilarity(reference, trial);
        return double.IsFinite(cosine) ? Math.Clamp(cosine, -1, 1) : -1;
    }

    /// <summary>
    /// True when every reference row holds values in [0, 1] summing to 1 within
    /// <see cref="ProbabilitySumTolerance"/>: the output already is a probability distribution.
    /// </summary>
    internal static bool LooksLikeProbabilities(float[] reference, int rowLength)
    {
        // Written as negated "within" tests so a NaN anywhere makes the answer false.
        if (!(TensorPrimitives.Min<float>(reference) >= 0) || !(TensorPrimitives.Max<float>(reference) <= 1)) return false;
        for (int start = 0; start < reference.Length; start += rowLength)
            if (!(Math.Abs(TensorPrimitives.Sum<float>(reference.AsSpan(start, rowLength)) - 1.0) <= ProbabilitySumTolerance))
                return false;
        return true;
    }

    private static double? Accuracy(OutputTensor first, int rowLength, IReadOnlyList<long> labels)
    {
        if (rowLength == 0 || first.Data.Length / rowLength != labels.Count || labels.Count == 0) return null;
        long correct = 0;
        for (int row = 0; row < labels.Count; row++)
            if (TensorPrimitives.IndexOfMax<float>(first.Data.AsSpan(row * rowLength, rowLength)) == labels[row]) correct++;
        return correct / (double)labels.Count;
    }

    private static int RowLength(OutputTensor output) => output.Shape.Count == 0 ? 1 : checked((int)output.Shape[^1]);

    private static void Validate(IReadOnlyList<OutputTensor> reference, IReadOnlyList<OutputTensor> trial)
    {
        if (reference.Count == 0)
            throw new ArgumentException("There are no outputs to compare.", nameof(reference));
        if (reference.Count != trial.Count)
            throw new ArgumentException($"The reference has {reference.Count} outputs, the trial {trial.Count}.", nameof(trial));
        for (int o = 0; o < reference.Count; o++)
        {
            var r = reference[o];
            var t = trial[o];
            if (r.Name != t.Name || !r.Shape.SequenceEqual(t.Shape))
                throw new ArgumentException(
                    $"Output {o} differs: reference '{r.Name}' {DatasetErrors.FormatShape(r.Shape)}, trial '{t.Name}' {DatasetErrors.FormatShape(t.Shape)}.", nameof(trial));
            long count = r.Shape.Aggregate(1L, (a, d) => a * d);
            if (r.Data.Length != count || t.Data.Length != count)
                throw new ArgumentException(
                    $"Output '{r.Name}' has shape {DatasetErrors.FormatShape(r.Shape)} ({count} values) but holds {r.Data.Length} (reference) and {t.Data.Length} (trial).", nameof(trial));
        }
    }
}

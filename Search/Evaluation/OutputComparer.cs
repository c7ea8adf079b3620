using System.Buffers;
using System.Numerics.Tensors;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Compares a trial's model outputs with the FP32 reference outputs and reduces them to a
/// <see cref="MetricSet"/>. A row is one slice along the last axis (a 0-d output is one row of one value).
/// </summary>
/// <remarks>
/// Sums accumulate in double over float row results. A trial output holding NaN or infinity scores
/// as badly as possible where the metric would otherwise be undefined: relative MSE +infinity, SQNR
/// -infinity, KL +infinity, and cosine -1 for the row.
/// </remarks>
public static class OutputComparer
{
    /// <summary>Reference rows whose values lie in [0, 1] and sum to 1 within this are taken as probabilities.</summary>
    internal const double ProbabilitySumTolerance = 1e-3;

    /// <summary>Floor for trial probabilities under a logarithm, so a zero where the reference is not gives a large, finite KL.</summary>
    internal const float ProbabilityEpsilon = 1e-10f;

    /// <summary>Longest stretch summed in float before the partial sum is carried in double.</summary>
    private const int ChunkLength = 4096;

    /// <summary>
    /// Computes every metric over all outputs. <paramref name="labels"/>, when given, are compared with
    /// the argmax of the trial's first output, whose row count must equal the label count (else
    /// accuracy is null).
    /// </summary>
    public static MetricSet Compare(IReadOnlyList<OutputTensor> reference, IReadOnlyList<OutputTensor> trial, IReadOnlyList<long>? labels)
    {
        ArgumentNullException.ThrowIfNull(reference);
        ArgumentNullException.ThrowIfNull(trial);
        Validate(reference, trial);

        double noise = 0, signal = 0, klSum = 0, cosineSum = 0;
        long rows = 0, agreeing = 0;
        for (int o = 0; o < reference.Count; o++)
        {
            var r = reference[o].Data;
            var t = trial[o].Data;
            int rowLength = RowLength(reference[o]);
            if (rowLength == 0 || r.Length == 0) continue;
            for (int start = 0; start < r.Length; start += ChunkLength)
            {
                int n = Math.Min(ChunkLength, r.Length - start);
                var rc = r.AsSpan(start, n);
                var tc = t.AsSpan(start, n);
                double d = TensorPrimitives.Distance<float>(rc, tc);
                noise += d * d;
                signal += TensorPrimitives.SumOfSquares<float>(rc);
            }

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
        }
        if (rows == 0)
            throw new ArgumentException("The outputs hold no values to compare.", nameof(reference));

        double relativeMse = noise == 0 ? 0 : double.IsNaN(noise) ? double.PositiveInfinity : noise / signal;
        double sqnr = relativeMse == 0 ? double.PositiveInfinity : -10 * Math.Log10(relativeMse);
        double kl = klSum / rows;
        return new MetricSet(
            RelativeMse: relativeMse,
            SqnrDb: sqnr,
            Top1Agreement: agreeing / (double)rows,
            KlDivergence: double.IsNaN(kl) ? double.PositiveInfinity : kl,
            CosineSimilarity: cosineSum / rows,
            Accuracy: labels is null ? null : Accuracy(trial[0], RowLength(reference[0]), labels));
    }

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

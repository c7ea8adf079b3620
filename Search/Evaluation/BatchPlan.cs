namespace Bitbudget.Search.Evaluation;

/// <summary>
/// How the calibration set is cut into runs: as many samples per run as the model's input shape
/// allows. A dynamic first dimension takes up to <c>maxBatch</c> samples; a fixed one takes exactly
/// that many, and a short last batch is padded by repeating its last sample (the padding rows are
/// dropped from the outputs).
/// </summary>
internal sealed class BatchPlan
{
    private BatchPlan(int samples, int batchSize, bool fixedBatch)
    {
        Samples = samples;
        BatchSize = batchSize;
        FixedBatch = fixedBatch;
    }

    public int Samples { get; }

    /// <summary>Samples per run.</summary>
    public int BatchSize { get; }

    /// <summary>True when the model fixes its first dimension, so every run must be full.</summary>
    public bool FixedBatch { get; }

    public int BatchCount => (Samples + BatchSize - 1) / BatchSize;

    public static BatchPlan For(IReadOnlyList<ValueDescription> inputs, int samples, int maxBatch)
    {
        long? fixedSize = null;
        foreach (var input in inputs)
        {
            var first = input.Shape.Count == 0 ? 1 : input.Shape[0];
            if (first is { } size && size > 0)
            {
                fixedSize = fixedSize is null ? size : Math.Min(fixedSize.Value, size);
            }
        }

        return fixedSize is { } k
            ? new BatchPlan(samples, (int)k, fixedBatch: true)
            : new BatchPlan(samples, Math.Max(1, Math.Min(samples, maxBatch)), fixedBatch: false);
    }

    /// <summary>First sample and number of real samples of batch <paramref name="index"/>.</summary>
    public (int Start, int Count) Batch(int index)
    {
        var start = index * BatchSize;
        return (start, Math.Min(BatchSize, Samples - start));
    }

    /// <summary>Rows the model sees for a batch of <paramref name="count"/> real samples.</summary>
    public int RowsFed(int count) => FixedBatch ? BatchSize : count;
}

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// How the calibration set is cut into runs: as many samples per run as the inputs' sample axes allow.
/// Dynamic sample axes take up to <c>maxBatch</c> samples; a fixed one takes exactly that many, and a
/// short last batch is padded by repeating its last sample (the padding is dropped from the outputs).
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

    /// <summary>True when the model fixes its sample axis, so every run must be full.</summary>
    public bool FixedBatch { get; }

    public int BatchCount => (Samples + BatchSize - 1) / BatchSize;

    public static BatchPlan For(CalibrationSet data, int maxBatch) =>
        data.SamplesPerRun is int k
            ? new BatchPlan(data.SampleCount, k, fixedBatch: true)
            : new BatchPlan(data.SampleCount, Math.Max(1, Math.Min(data.SampleCount, maxBatch)), fixedBatch: false);

    /// <summary>First sample and number of real samples of batch <paramref name="index"/>.</summary>
    public (int Start, int Count) Batch(int index)
    {
        var start = index * BatchSize;
        return (start, Math.Min(BatchSize, Samples - start));
    }

    /// <summary>Rows the model sees for a batch of <paramref name="count"/> real samples.</summary>
    public int RowsFed(int count) => FixedBatch ? BatchSize : count;
}

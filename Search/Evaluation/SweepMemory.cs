using System.Globalization;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Splits <see cref="TrialSessionOptions.MaxSweepMemoryBytes"/> between what a sweep must hold whatever it does (the data
/// and its feeds, the weights three times over, the reference and one trial's outputs for every sample, the dead
/// outputs of finished trials that wait for the collector, see <see cref="DeadOutputs"/>, and what the weight rounder
/// holds, see <see cref="WeightRounder.HeldBytes"/>), the activations
/// ONNX Runtime holds while it runs a chunk of samples (at most every tensor of the graph for each sample of the chunk,
/// measured on a one-sample run), and the activations cached at cut points, which get what is left. Half of what is left
/// after the fixed part goes to a run's chunk, so the cache never starves a run.
/// </summary>
internal static class SweepMemory
{
    /// <param name="SamplesPerRun">Samples in one run (a chunk).</param>
    /// <param name="CacheBudgetBytes">Memory the cut points' cached activations may take together.</param>
    /// <param name="Reason">How the chunk was chosen, for the user.</param>
    /// <param name="DeadOutputBytes">Outputs of finished trials allowed to wait for the collector (see <see cref="DeadOutputs"/>).</param>
    /// <param name="RunAndCacheBytes">What the budget leaves for one run's activations and the cache together (stacked copies of a
    /// chunk share it with the cache).</param>
    /// <param name="ActivationBytesPerSample">Activations one sample of a run may hold (0: not measured).</param>
    public sealed record Choice(int SamplesPerRun, long CacheBudgetBytes, string Reason, long DeadOutputBytes, long RunAndCacheBytes = 0, long ActivationBytesPerSample = 0);

    /// <summary>
    /// The least allowance for dead outputs: a model with small outputs is then collected once every few MiB of trials
    /// rather than after each one (our choice; a collection costs milliseconds).
    /// </summary>
    public const long MinimumDeadOutputBytes = 16L << 20;

    public static Choice Plan(CalibrationSet data, TrialSessionOptions options, IReadOnlyDictionary<string, long[]> shapes, int probeRows, global::Onnx.ModelProto plain, long parameters)
    {
        const double MiB = 1 << 20;
        long Bytes(string name) => shapes.TryGetValue(name, out var shape) ? shape.Aggregate((long)sizeof(float), (p, d) => p * Math.Max(d, 0)) : 0;
        var rows = Math.Max(1, probeRows);
        var activationsPerSample = plain.Graph.Node.SelectMany(n => n.Output).Where(o => o.Length > 0).Distinct(StringComparer.Ordinal).Sum(Bytes) / rows;
        var outputsPerSample = plain.Graph.Output.Sum(o => Bytes(o.Name)) / rows;
        var dataBytes = data.Inputs.Sum(a => (long)Buffer.ByteLength(a.Data));
        var outputBytes = outputsPerSample * data.SampleCount;
        var dead = Math.Max(outputBytes, MinimumDeadOutputBytes);
        var rounderBytes = options.Rounder?.HeldBytes ?? 0;
        var fixedBytes = (2 * dataBytes) + (3 * parameters * sizeof(float)) + (3 * outputBytes) + dead + rounderBytes;
        var rest = Math.Max(0, options.MaxSweepMemoryBytes - fixedBytes);
        var cap = Math.Max(1, Math.Min(options.MaxBatch, data.SampleCount));
        var limit = string.Create(CultureInfo.InvariantCulture, $"MaxSweepMemoryBytes {options.MaxSweepMemoryBytes / MiB:#,0} MiB, {fixedBytes / MiB:#,0.#} MiB of it for data, weights, outputs{(rounderBytes > 0 ? " and the weight rounder" : string.Empty)}, including {dead / MiB:#,0.#} MiB of finished trials' outputs awaiting the garbage collector")
            + (rounderBytes > 0 ? string.Create(CultureInfo.InvariantCulture, $" and {rounderBytes / MiB:#,0.#} MiB of layer input moments and rounding factors") : string.Empty);

        if (data.SamplesPerRun is int fixedRun)
        {
            return new Choice(fixedRun, Math.Min(options.MaxCachedActivationBytes, Math.Max(0, rest - (fixedRun * activationsPerSample))), $"{fixedRun} samples per run, as the model fixes its batch ({limit})", dead, rest, activationsPerSample);
        }

        if (activationsPerSample <= 0)
        {
            return new Choice(cap, Math.Min(options.MaxCachedActivationBytes, rest), $"up to {cap} samples per run (activation sizes could not be measured; {limit})", dead, rest);
        }

        var chunk = (int)Math.Clamp(rest / 2 / activationsPerSample, 1, cap);
        var cache = Math.Min(options.MaxCachedActivationBytes, Math.Max(0, rest - (chunk * activationsPerSample)));
        return new Choice(
            chunk,
            cache,
            string.Create(CultureInfo.InvariantCulture, $"{chunk:#,0} of {data.SampleCount:#,0} samples per run (at most {activationsPerSample / MiB:#,0.#} MiB of activations per sample; {limit})"),
            dead,
            rest,
            activationsPerSample);
    }
}

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Finds each model output's sample axis, so outputs are joined and compared sample by sample however
/// the model lays them out (a next-state output <c>[2, batch, 128]</c> holds its samples on axis 1).
/// </summary>
/// <remarks>
/// The rule. With dynamic batches and at least two samples, the model runs once on 1 sample and once
/// on 2: the sample axis is the axis whose size goes from 1 to 2 (when several do, the one the model
/// declares dynamic, else the first). An output whose shape does not change has no sample axis: it
/// holds one value per run and is compared run by run. An output that grows with the batch along no
/// axis that holds one entry per sample (say it flattens the batch into another axis) is refused.
/// With a fixed batch of k samples (or a single sample, k = 1) two batch sizes cannot be tried: the
/// sample axis is the output's axis of size k, preferring the one axis the model declares dynamic, then
/// the first; an output with no axis of size k has none.
/// </remarks>
internal static class OutputSampleAxes
{
    public static IReadOnlyDictionary<string, int?> Find(
        IReadOnlyList<ValueDescription> declared,
        IReadOnlyList<string> names,
        BatchPlan plan,
        Func<int, Dictionary<string, long[]>> probe)
    {
        var byName = declared.ToDictionary(d => d.Name, StringComparer.Ordinal);
        var result = new Dictionary<string, int?>(StringComparer.Ordinal);
        if (!plan.FixedBatch && plan.Samples >= 2)
        {
            var one = probe(1);
            var two = probe(2);
            foreach (var name in names)
            {
                result[name] = FromTwoRuns(name, one[name], two[name], byName.GetValueOrDefault(name));
            }

            return result;
        }

        var k = plan.FixedBatch ? plan.BatchSize : 1;
        var shapes = probe(k);
        foreach (var name in names)
        {
            var candidates = Enumerable.Range(0, shapes[name].Length).Where(a => shapes[name][a] == k).ToList();
            result[name] = Prefer(candidates, byName.GetValueOrDefault(name));
        }

        return result;
    }

    private static int? FromTwoRuns(string name, long[] one, long[] two, ValueDescription? declared)
    {
        if (one.Length != two.Length)
        {
            throw new EngineException(
                "output-sample-axis-unknown",
                $"Output '{name}' changes rank with the batch size ({DatasetErrors.FormatShape(one)} for 1 sample, {DatasetErrors.FormatShape(two)} for 2), so its samples cannot be told apart.");
        }

        var candidates = Enumerable.Range(0, one.Length).Where(a => one[a] == 1 && two[a] == 2).ToList();
        if (candidates.Count > 0)
        {
            return Prefer(candidates, declared);
        }

        var changed = Enumerable.Range(0, one.Length).FirstOrDefault(a => one[a] != two[a], -1);
        if (changed >= 0)
        {
            throw new EngineException(
                "output-sample-axis-unknown",
                $"Output '{name}' grows with the batch on axis {changed} ({one[changed]} for 1 sample, {two[changed]} for 2) but has no axis with one entry per sample, so its samples cannot be told apart; give the model an output laid out per sample.");
        }

        return null;
    }

    private static int? Prefer(List<int> candidates, ValueDescription? declared)
    {
        if (candidates.Count <= 1)
        {
            return candidates.Count == 1 ? candidates[0] : null;
        }

        var dynamic = declared is null ? [] : candidates.Where(a => a < declared.Shape.Count && declared.Shape[a] is not > 0).ToList();
        return dynamic.Count == 1 ? dynamic[0] : candidates[0];
    }
}

using System.Diagnostics;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// The sensitivity sweep: every searched layer at every candidate bit width, one trial each, in a
/// fixed order (model order, then widths from high to low). Trials already in the store are skipped,
/// so a restarted search resumes where it stopped; each new trial is saved as soon as it finishes.
/// </summary>
public static class SensitivitySweep
{
    /// <summary>
    /// The trials of a sweep, in the order they run: one per layer, width and rounding (<see cref="RoundingChoices.For"/>;
    /// <paramref name="compensates"/> tells which layers can be rounded with compensation).
    /// </summary>
    public static IReadOnlyList<SweepTrial> Plan(IReadOnlyList<WeightLayer> layers, SearchSettings settings, Func<string, bool>? compensates = null)
    {
        var trials = new List<SweepTrial>();
        var excluded = (settings.Excluded ?? []).ToHashSet(StringComparer.Ordinal);
        var activations = ActivationsFor(settings);
        foreach (var layer in layers.Where(l => !excluded.Contains(l.Name)))
        {
            foreach (var bits in CandidateBits(layer, settings))
            {
                // Keeping FP32 changes nothing; it needs no trial.
                if (bits == BitWidths.Float32)
                {
                    continue;
                }

                foreach (var rounding in RoundingChoices.For(layer.Name, settings, compensates))
                {
                    var setting = SettingFor(bits, settings) with { Rounding = rounding };
                    trials.Add(new SweepTrial(TrialKeys.Sensitivity(layer.Name, setting, activations), layer, setting, activations));
                }
            }
        }

        return trials;
    }

    /// <summary>The widths a layer may take: its pin, or every candidate (high to low).</summary>
    public static IReadOnlyList<int> CandidateBits(WeightLayer layer, SearchSettings settings) =>
        settings.Pins is not null && settings.Pins.TryGetValue(layer.Name, out var pinned)
            ? [pinned]
            : settings.Bits.Distinct().OrderDescending().ToList();

    /// <summary>
    /// How activations are calibrated, or null when the search quantizes weights only: percentile when the
    /// weights are clipped at a percentile, min-max otherwise (the MSE and analytic clips are weight methods).
    /// </summary>
    public static ActivationCalibration? ActivationsFor(SearchSettings settings) =>
        !settings.QuantizeActivations ? null
        : settings.Clip == ClipMethod.Percentile ? ActivationCalibration.Percentile
        : ActivationCalibration.MinMax;

    /// <summary>The full setting a width gets under the search's scheme, granularity, clipping and bias correction (integer widths only).</summary>
    public static LayerSetting SettingFor(int bits, SearchSettings settings) =>
        new(bits, settings.Scheme, settings.Granularity, settings.Clip, BiasCorrection: settings.BiasCorrection && BitWidths.IsInteger(bits));

    /// <summary>
    /// Runs the trials not yet in <paramref name="store"/> and returns every trial's record by key. A layer's trials
    /// still to measure are measured together (<see cref="TrialSession.MeasureLayerWidths"/>: several widths per run where
    /// the batch is free), each saved as soon as its run finishes with an equal share of the run's time.
    /// Cancellation is honoured between layers.
    /// </summary>
    public static IReadOnlyDictionary<string, TrialRecord> Run(
        TrialSession session,
        IReadOnlyList<SweepTrial> trials,
        ITrialStore store,
        IProgress<SearchProgress>? progress,
        CancellationToken cancellationToken)
    {
        var stored = new Dictionary<string, TrialRecord>(store.LoadAll(), StringComparer.Ordinal);
        var results = new Dictionary<string, TrialRecord>(StringComparer.Ordinal);
        var perLayer = trials.GroupBy(t => t.Layer.Name).ToDictionary(g => g.Key, g => g.Count(), StringComparer.Ordinal);

        // Cut points are chosen for the trials still to measure; a sweep read whole from the store caches nothing.
        session.PrepareSweep(trials.Where(t => !stored.ContainsKey(t.Key)).GroupBy(t => t.Layer.Name).ToDictionary(g => g.Key, g => g.Count(), StringComparer.Ordinal));
        var done = 0;
        progress?.Report(new SearchProgress(SearchStage.Sweep, 0, trials.Count));

        // A layer's trials still to measure go to the session together, so it can measure several widths in one run.
        for (var start = 0; start < trials.Count;)
        {
            var end = start;
            while (end < trials.Count && trials[end].Layer.Name == trials[start].Layer.Name)
            {
                end++;
            }

            var group = trials.Skip(start).Take(end - start).ToList();
            var pending = group.Where(t => !stored.ContainsKey(t.Key)).ToList();
            if (pending.Count > 0)
            {
                cancellationToken.ThrowIfCancellationRequested();
                var clock = Stopwatch.StartNew();
                var measured = session.MeasureLayerWidths(pending[0].Layer, pending.Select(t => t.Setting).ToList(), perLayer[pending[0].Layer.Name]);
                var each = clock.Elapsed.TotalMilliseconds / pending.Count;
                for (var i = 0; i < pending.Count; i++)
                {
                    var trial = pending[i];
                    var record = new TrialRecord(
                        trial.Key, "sensitivity", trial.Layer.Name, trial.Setting.Bits, null, measured[i], each, new Dictionary<string, LayerSetting> { [trial.Layer.Name] = trial.Setting }, trial.Activations);
                    store.Save(record);
                    stored[trial.Key] = record;
                }
            }

            foreach (var trial in group)
            {
                results[trial.Key] = stored[trial.Key];
                progress?.Report(new SearchProgress(SearchStage.Sweep, ++done, trials.Count));
            }

            start = end;
        }

        return results;
    }
}

using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// The search as a multiple-choice knapsack: for each searched layer, its candidate settings with
/// the bytes they take in the written file (<see cref="ModelSizer"/>) and additive error (from its
/// sensitivity trial). Excluded layers stay FP32 and, with the rest of the file, only add bytes. A layer the
/// calibration set does not reach (<see cref="LayerCoverage"/>) is planned with its highest candidate only,
/// while its other measured candidates stay in the report. A candidate whose trial made the outputs non-finite
/// (NaN or infinity: FP16 overflowing on a weight beyond +-65504, for one) is no choice at all: it stays in the
/// report and in <see cref="NonFiniteChoices"/>, but the solvers never see it. (An infinite error also comes from
/// any change to a judged output that is zero on every sample: SQNR divides by its power.)
/// </summary>
internal sealed class PlanningProblem
{
    private PlanningProblem(
        SearchSettings settings,
        OutputJudge judge,
        IReadOnlyList<WeightLayer> searched,
        IReadOnlyList<PlanningLayer> candidates,
        IReadOnlyList<LayerCoverage> coverage,
        IReadOnlyList<WeightLayer> excluded,
        IReadOnlyDictionary<string, MetricSet> sensitivity,
        ModelSizer sizer)
    {
        Candidates = candidates;
        Coverage = coverage;
        var flagged = coverage.Where(c => c.Flagged).ToDictionary(c => c.Layer, c => c.KeptBits, StringComparer.Ordinal);
        NonFiniteChoices = candidates.SelectMany(l => l.Choices.Where(c => !double.IsFinite(c.Error)).Select(c => (l.Name, c.Bits))).ToList();
        var layers = candidates.Select(l => flagged.TryGetValue(l.Name, out var kept)
            ? l with { Choices = l.Choices.Where(c => c.Bits == kept).ToList() }
            : l)
            .Select(l => l with { Choices = l.Choices.Where(c => double.IsFinite(c.Error)).ToList() })
            .ToList();
        if (layers.FirstOrDefault(l => l.Choices.Count == 0) is { } stuck)
        {
            throw new EngineException(
                "trial-non-finite",
                $"Every candidate width left for layer '{stuck.Name}' gives an infinite error on the calibration set (non-finite outputs, or a change to an output that is zero on every sample); add 32 (keep FP32) to the candidate widths, pin the layer to a width that works, or exclude it.");
        }

        Settings = settings;
        Judge = judge;
        Searched = searched;
        Layers = layers;
        Excluded = excluded;
        Sensitivity = sensitivity;
        Sizer = sizer;
        ExcludedBytes = excluded.Sum(l => sizer.LayerBytes(l, LayerSetting.KeepFloat32));
        TotalParameters = searched.Sum(l => l.ParameterCount) + excluded.Sum(l => l.ParameterCount);
    }

    /// <summary>Measured candidates (layer, bits) whose error is infinite and which are therefore not offered.</summary>
    public IReadOnlyList<(string Layer, int Bits)> NonFiniteChoices { get; }

    /// <summary>How bytes are counted.</summary>
    public ModelSizer Sizer { get; }

    public SearchSettings Settings { get; }

    /// <summary>The metric the additive error model sums (see <see cref="AdditiveError"/>).</summary>
    public BudgetMetric Metric => Judge.Metric;

    /// <summary>Which outputs the budget judges; a layer's additive error is that of its worst judged output.</summary>
    public OutputJudge Judge { get; }

    /// <summary>Searched layers, in the same order as <see cref="Layers"/>.</summary>
    public IReadOnlyList<WeightLayer> Searched { get; }

    /// <summary>What the solvers choose from: <see cref="Candidates"/> with each flagged layer down to its kept width.</summary>
    public IReadOnlyList<PlanningLayer> Layers { get; }

    /// <summary>Every measured candidate of every searched layer, in the order of <see cref="Searched"/>.</summary>
    public IReadOnlyList<PlanningLayer> Candidates { get; }

    /// <summary>Coverage of each searched layer, in the order of <see cref="Searched"/>; empty when not judged.</summary>
    public IReadOnlyList<LayerCoverage> Coverage { get; }

    public IReadOnlyList<WeightLayer> Excluded { get; }

    /// <summary>Sensitivity trial metrics by trial key.</summary>
    public IReadOnlyDictionary<string, MetricSet> Sensitivity { get; }

    /// <summary>Bytes of the excluded layers' FP32 weights in the file.</summary>
    public long ExcludedBytes { get; }

    /// <summary>Bytes of the file no choice changes (graph, biases, other tensors).</summary>
    public long OtherBytes => Sizer.OtherBytes;

    public long TotalParameters { get; }

    /// <summary>Size of the model file with every weight FP32.</summary>
    public long Float32Bytes => Sizer.Float32FileBytes;

    public static PlanningProblem Build(
        OnnxModel model,
        SearchSettings settings,
        MetricSet reference,
        IReadOnlyDictionary<string, TrialRecord> sweep,
        ModelSizer sizer,
        int? samples = null)
    {
        var metric = settings.Budget switch
        {
            ErrorBudget e => e.Metric,
            SizeBudget s => s.Metric,
            _ => BudgetMetric.Sqnr,
        };
        var judge = new OutputJudge(metric, settings.Outputs);
        var excludedNames = (settings.Excluded ?? []).ToHashSet(StringComparer.Ordinal);
        var searched = model.Layers.Where(l => !excludedNames.Contains(l.Name)).ToList();
        var excluded = model.Layers.Where(l => excludedNames.Contains(l.Name)).ToList();
        var sensitivity = sweep.ToDictionary(p => p.Key, p => p.Value.Metrics, StringComparer.Ordinal);
        var activations = SensitivitySweep.ActivationsFor(settings);
        var layers = searched.Select(layer => new PlanningLayer(
            layer.Name,
            SensitivitySweep.CandidateBits(layer, settings).Select(bits =>
            {
                var bytes = sizer.LayerBytes(layer, SensitivitySweep.SettingFor(bits, settings));
                if (bits == BitWidths.Float32)
                {
                    return new PlanningChoice(bits, bytes, 0);
                }

                // Same bytes whatever the rounding: keep the measured one with the least error, nearest on a tie.
                return RoundingChoices.Measured(layer.Name, bits, settings, sensitivity.ContainsKey)
                    .Select(s => new PlanningChoice(bits, bytes, judge.ToAdditive(sensitivity[TrialKeys.Sensitivity(layer.Name, s, activations)], reference), s.Rounding))
                    .Aggregate((best, next) => next.Error < best.Error ? next : best);
            }).ToList())).ToList();
        var coverage = samples is not { } count ? [] : searched.Select(layer =>
        {
            var widths = SensitivitySweep.CandidateBits(layer, settings);
            var changed = widths.Where(b => b != BitWidths.Float32)
                .Select(b => RoundingChoices.Measured(layer.Name, b, settings, sweep.ContainsKey)
                    .Max(s => sweep[TrialKeys.Sensitivity(layer.Name, s, activations)].Metrics.SamplesChanged))
                .ToList();
            return LayerCoverage.Judge(layer.Name, changed, count, widths.Max());
        }).ToList();
        return new PlanningProblem(settings, judge, searched, layers, coverage, excluded, sensitivity, sizer);
    }

    /// <summary>The assignment a selection stands for, by layer name.</summary>
    public IReadOnlyDictionary<string, LayerSetting> AssignmentOf(Selection selection)
    {
        var assignment = new SortedDictionary<string, LayerSetting>(StringComparer.Ordinal);
        for (var i = 0; i < Layers.Count; i++)
        {
            var choice = Layers[i].Choices[selection.ChoiceIndex[i]];
            assignment[Layers[i].Name] = SensitivitySweep.SettingFor(choice.Bits, Settings) with { Rounding = choice.Rounding };
        }

        return assignment;
    }

    /// <summary>Every layer at its least-error (highest) candidate.</summary>
    public Selection Highest()
    {
        var index = new int[Layers.Count];
        long bytes = 0;
        double error = 0;
        for (var i = 0; i < Layers.Count; i++)
        {
            var choices = Layers[i].Choices;
            var best = 0;
            for (var c = 1; c < choices.Count; c++)
            {
                if (choices[c].Bits > choices[best].Bits)
                {
                    best = c;
                }
            }

            index[i] = best;
            bytes += choices[best].Bytes;
            error += choices[best].Error;
        }

        return new Selection(index, bytes, error);
    }

    /// <summary>Predicted size of the model file under a selection: its layers, the excluded layers and everything else.</summary>
    public long TotalBytes(Selection selection) => selection.Bytes + ExcludedBytes + OtherBytes;

    /// <summary>Stored bits per quantizable weight for a file of <paramref name="totalBytes"/>: the layers' bytes (scales, zero points and nodes included) x 8 / parameters.</summary>
    public double AverageBits(long totalBytes) => CostModel.AverageBits(totalBytes - OtherBytes, TotalParameters);

    /// <summary>The largest file size whose layers average at most <paramref name="averageBits"/> bits per weight.</summary>
    public long TotalBytesForAverageBits(double averageBits) => CostModel.LayerBytesForAverageBits(averageBits, TotalParameters) + OtherBytes;
}

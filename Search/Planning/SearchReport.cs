using System.Globalization;
using System.Text;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>Turns a finished search into its artifacts: manifest, sensitivity CSV, frontier JSON.</summary>
internal sealed class SearchReport(
    OnnxModel model,
    CalibrationSet data,
    SearchSettings settings,
    MetricSet reference,
    PlanningProblem problem,
    IReadOnlyList<Selection> frontier,
    SearchDecision decision,
    ExportedModel? exported,
    IReadOnlyList<ActivationQuantization> activations,
    int trialCount,
    OpsetRaiseComparison? raiseCheck,
    IReadOnlyDictionary<string, int?> outputAxes,
    HeldOutCheck? heldOut,
    IReadOnlyList<string> warnings,
    string? storageNote = null)
{
    /// <summary>Most frontier points written; a longer frontier is thinned evenly (its ends kept).</summary>
    public const int MaxFrontierPoints = 400;

    public SearchResult ToResult()
    {
        var manifest = BuildManifest(DateTimeOffset.UtcNow);
        var chosen = decision.Chosen;
        var metric = problem.Metric;
        var heldOutValue = heldOut is null ? (double?)null : problem.Judge.Value(heldOut.Measured, heldOut.Reference);
        return new SearchResult(
            decision.Feasible,
            decision.Message,
            ManifestJson.Serialize(manifest),
            exported?.Bytes,
            SensitivityCsv(),
            Encoding.UTF8.GetString(ManifestJson.Serialize(Frontier())),
            chosen?.Bytes ?? 0,
            manifest.Totals?.AverageBits ?? 0,
            manifest.Totals?.Compression ?? 0,
            chosen is null ? double.NaN : AdditiveError.FromAdditive(metric, chosen.PredictedAdditive, reference),
            chosen is null ? double.NaN : problem.Judge.Value(chosen.Measured, reference),
            trialCount,
            [.. Warnings(), .. warnings],
            heldOut?.Samples,
            heldOutValue,
            heldOut is not null && settings.Budget is ErrorBudget error ? problem.Judge.Meets(error.Limit, heldOut.Measured, heldOut.Reference) : null,
            exported?.FileBytes,
            Wire(settings.Storage),
            storageNote);
    }

    public AssignmentManifest BuildManifest(DateTimeOffset createdAt)
    {
        var chosen = decision.Chosen;
        var metric = problem.Metric;
        var layers = model.Layers.Select(layer => Layer(layer, chosen)).ToList();
        ManifestTotals? totals = chosen is null ? null : new ManifestTotals(
            chosen.Bytes,
            problem.Float32Bytes,
            problem.AverageBits(chosen.Bytes),
            problem.Float32Bytes / (double)(exported?.FileBytes ?? chosen.Bytes),
            AdditiveError.FromAdditive(metric, chosen.PredictedAdditive, reference),
            Metrics(chosen.Measured),
            problem.Judge.Value(chosen.Measured, reference),
            problem.Judge.Binding(chosen.Measured)?.Name,
            Wire(settings.Storage),
            exported?.FileBytes,
            problem.Float32Bytes / (double)chosen.Bytes);
        ManifestHeldOut? held = heldOut is null ? null : new ManifestHeldOut(
            heldOut.Samples,
            problem.Judge.Value(heldOut.Measured, heldOut.Reference),
            problem.Judge.Binding(heldOut.Measured)?.Name,
            settings.Budget is ErrorBudget error ? problem.Judge.Meets(error.Limit, heldOut.Measured, heldOut.Reference) : null,
            Metrics(heldOut.Measured));
        var export = exported is null ? null : new ManifestExport(exported.Format, exported.Opset, exported.Note);
        return new AssignmentManifest(
            AssignmentManifest.CurrentFormatVersion,
            createdAt,
            new ManifestModel(model.Name, model.Sha256, model.Opset, problem.TotalParameters, model.Notes, model.OriginalOpset, OpsetRaise()),
            new ManifestDataset(
                data.SampleCount,
                data.Labels is not null,
                model.Inputs.Select((input, i) => (input.Name, Axis: data.SampleAxes[i])).ToDictionary(p => p.Name, p => p.Axis, StringComparer.Ordinal),
                new SortedDictionary<string, int?>(outputAxes.ToDictionary(), StringComparer.Ordinal)),
            new ManifestSettings(
                settings.Bits.Distinct().Order().ToList(),
                Wire(settings.Method),
                Wire(settings.Scheme),
                Wire(settings.Granularity),
                Wire(settings.Clip),
                settings.QuantizeActivations,
                new SortedDictionary<string, int>((settings.Pins ?? new Dictionary<string, int>()).ToDictionary(), StringComparer.Ordinal),
                (settings.Excluded ?? []).Order(StringComparer.Ordinal).ToList(),
                settings.Outputs is { Count: > 0 } judged ? judged.ToList() : model.Outputs.Select(o => o.Name).ToList(),
                Wire(settings.MetricSpace),
                Wire(settings.Storage),
                RoundingChoices.Asked(settings).Select(r => Wire(r)).ToList(),
                settings.Pairs,
                settings.BiasCorrection),
            Budget(),
            new ManifestOutcome(decision.Feasible, decision.Message, decision.Rounds.Count, storageNote, Rounds(), Pairs()),
            totals,
            Metrics(reference),
            layers,
            export,
            trialCount,
            [.. Warnings(), .. warnings],
            model.Skipped.Select(s => new ManifestSkipped(s.Node, s.Op, s.Input, s.Parameters, s.Reason)).ToList(),
            held);
    }

    private List<ManifestRound> Rounds() => decision.Rounds.Select(r => new ManifestRound(
        r.Bytes,
        AdditiveError.FromAdditive(problem.Metric, r.PredictedAdditive, reference),
        r.PredictedCorrected is { } corrected ? AdditiveError.FromAdditive(problem.Metric, corrected, reference) : null,
        problem.Judge.Value(r.Measured, reference),
        r.MeetsBudget)).ToList();

    private List<ManifestPair> Pairs() => (decision.Pairs ?? []).Select(p => new ManifestPair(
        problem.Layers[p.First].Name,
        problem.Layers[p.First].Choices[p.FirstChoice].Bits,
        problem.Layers[p.Second].Name,
        problem.Layers[p.Second].Choices[p.SecondChoice].Bits,
        AdditiveError.FromAdditive(problem.Metric, p.Joint, reference),
        p.Term)).ToList();

    private ManifestOpsetRaise? OpsetRaise() => model.Raise is not { } raise
        ? null
        : new ManifestOpsetRaise(
            raise.FromOpset,
            raise.ToOpset,
            raise.Rewritten,
            raiseCheck?.RelativeDifference ?? 0,
            raiseCheck?.MaxRelativeDifference ?? 0,
            raiseCheck?.BitExact ?? true);

    /// <summary>One row per (layer, candidate width): its bytes, additive error and measured metrics; columns named as the manifest's fields.</summary>
    public string SensitivityCsv()
    {
        var csv = new StringBuilder("layer,op,parameters,bits,bytes,additiveError,sqnrDb,relativeMse,top1Agreement,klDivergence,cosineSimilarity,accuracy,rounding\n");
        for (var i = 0; i < problem.Layers.Count; i++)
        {
            var layer = problem.Searched[i];
            foreach (var choice in problem.Candidates[i].Choices.OrderBy(c => c.Bits))
            {
                var m = SensitivityOf(layer, choice.Bits, choice.Rounding);
                csv.Append(Csv(layer.Name)).Append(',').Append(layer.Op).Append(',')
                    .Append(layer.ParameterCount.ToString(CultureInfo.InvariantCulture)).Append(',')
                    .Append(choice.Bits.ToString(CultureInfo.InvariantCulture)).Append(',')
                    .Append(choice.Bytes.ToString(CultureInfo.InvariantCulture)).Append(',')
                    .Append(Number(choice.Error)).Append(',')
                    .Append(Number(m?.SqnrDb)).Append(',').Append(Number(m?.RelativeMse)).Append(',')
                    .Append(Number(m?.Top1Agreement)).Append(',').Append(Number(m?.KlDivergence)).Append(',')
                    .Append(Number(m?.CosineSimilarity)).Append(',').Append(Number(m?.Accuracy)).Append(',')
                    .Append(Wire(choice.Rounding)).Append('\n');
            }
        }

        return csv.ToString();
    }

    public FrontierDocument Frontier()
    {
        var points = frontier;
        if (points.Count > MaxFrontierPoints)
        {
            points = Enumerable.Range(0, MaxFrontierPoints)
                .Select(i => frontier[(int)Math.Round(i * (frontier.Count - 1) / (double)(MaxFrontierPoints - 1))])
                .Distinct()
                .ToList();
        }

        var metric = problem.Metric;
        return new FrontierDocument(
            MetricValues.Name(metric),
            AdditiveError.Describe(metric),
            problem.Layers.Select(l => l.Name).ToList(),
            frontier.Count,
            points.Select(p =>
            {
                var bytes = problem.TotalBytes(p);
                return new FrontierPoint(
                    bytes,
                    problem.AverageBits(bytes),
                    p.Error,
                    AdditiveError.FromAdditive(metric, p.Error, reference),
                    p.ChoiceIndex.Select((c, i) => problem.Layers[i].Choices[c].Bits).ToList());
            }).ToList());
    }

    private ManifestLayer Layer(WeightLayer layer, AssignmentMeasurement? chosen)
    {
        var index = problem.Searched.ToList().FindIndex(l => l.Name == layer.Name);
        var excluded = index < 0;
        var setting = excluded
            ? LayerSetting.KeepFloat32
            : chosen?.Assignment[layer.Name];
        var bits = setting?.Bits;
        var sensitivity = excluded
            ? []
            : problem.Candidates[index].Choices.OrderBy(c => c.Bits).Select(c => new ManifestSensitivity(
                c.Bits,
                c.Bytes,
                c.Error,
                // Keeping FP32 is not measured: it is the reference itself (no error, SQNR "Infinity").
                SensitivityOf(layer, c.Bits, c.Rounding) is { } m ? Metrics(m) : Metrics(reference),
                Wire(c.Rounding))).ToList();
        var granularity = setting is { Granularity: var g } ? g : settings.Granularity;
        return new ManifestLayer(
            layer.Name,
            layer.Op,
            layer.WeightName,
            layer.Shape,
            layer.ParameterCount,
            bits,
            Wire(settings.Scheme),
            Wire(granularity),
            granularity == Granularity.PerChannel ? layer.ChannelAxis : -1,
            Wire(settings.Clip),
            setting is not null ? problem.Sizer.LayerBytes(layer, setting) : 0,
            excluded,
            settings.Pins?.ContainsKey(layer.Name) ?? false,
            sensitivity,
            settings.QuantizeActivations && bits is { } integer && BitWidths.IsInteger(integer)
                ? activations.Where(a => a.Layer == layer.Name).Select(a => new ManifestActivation(a.Consumer, a.Tensor, a.Scale, a.ZeroPoint)).ToList()
                : null,
            excluded ? null : Coverage(problem.Coverage.ElementAtOrDefault(index)),
            Wire(setting?.Rounding ?? RoundingMethod.Nearest));
    }

    private static ManifestCoverage? Coverage(LayerCoverage? coverage) => coverage is null ? null : new ManifestCoverage(
        LayerCoverage.Wire(coverage.Status),
        coverage.SamplesChanged,
        coverage.Samples,
        coverage.Flagged ? coverage.Reason : null);

    /// <summary>One sentence per layer the calibration set does not (or barely) reach: the search summary's warnings.</summary>
    private IReadOnlyList<string> Warnings() => problem.Coverage.Where(c => c.Flagged).Select(c => c.Reason).ToList();

    private MetricSet? SensitivityOf(WeightLayer layer, int bits, RoundingMethod rounding) =>
        bits == BitWidths.Float32
            ? null
            : problem.Sensitivity.GetValueOrDefault(TrialKeys.Sensitivity(layer.Name, SensitivitySweep.SettingFor(bits, settings) with { Rounding = rounding }, SensitivitySweep.ActivationsFor(settings)));

    private ManifestBudget Budget() => settings.Budget switch
    {
        ErrorBudget e => new ManifestBudget(
            "error",
            MetricValues.Name(e.Metric),
            AdditiveError.IsLowerBound(e.Metric) ? e.Limit : null,
            AdditiveError.IsLowerBound(e.Metric) ? null : e.Limit,
            null,
            null,
            AdditiveError.Describe(e.Metric)),
        SizeBudget s => new ManifestBudget("size", MetricValues.Name(s.Metric), null, null, s.Bytes, s.AverageBits, AdditiveError.Describe(s.Metric)),
        _ => throw new InvalidOperationException("Unknown budget."),
    };

    private ManifestMetrics Metrics(MetricSet m) => ManifestMetricsOf.From(m, problem.Judge.Judges);

    private static string Wire<T>(T value)
        where T : struct, Enum => WireNames.Format(value);

    private static string Number(double? value) =>
        value is { } v ? v.ToString("R", CultureInfo.InvariantCulture) : string.Empty;

    private static string Csv(string text) =>
        text.Contains(',') || text.Contains('"') ? "\"" + text.Replace("\"", "\"\"") + "\"" : text;
}

using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// The whole job: FP32 reference, sensitivity sweep, search over the additive error model,
/// end-to-end validation (tightening the additive budget when a choice misses when measured), and
/// the artifacts; with a held-out dataset, the chosen assignment is also measured on it. Every measurement goes through the <see cref="ITrialStore"/>, so a search that runs
/// again measures nothing twice.
/// </summary>
public static class SearchRunner
{
    /// <summary>Most solve-and-measure rounds before falling back to the highest candidate everywhere.</summary>
    public const int MaxValidationRounds = 6;

    /// <summary>
    /// Runs a search; throws <see cref="EngineException"/> for settings that cannot work and <see cref="OperationCanceledException"/> when cancelled.
    /// With <see cref="SearchSettings.TargetOpset"/>, <paramref name="model"/> must have been loaded with that target; the raise is
    /// first checked in ONNX Runtime on <paramref name="data"/> (<see cref="OpsetRaiseCheck"/>) and refused when it moved an output.
    /// Given <paramref name="holdout"/>, the chosen assignment is also measured on it.
    /// </summary>
    public static SearchResult Run(
        OnnxModel model,
        CalibrationSet data,
        SearchSettings settings,
        ITrialStore store,
        IProgress<SearchProgress>? progress,
        CancellationToken cancellationToken,
        TrialSessionOptions? sessionOptions = null,
        CalibrationSet? holdout = null)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(settings);
        var bitsGiven = settings.Bits.Count > 0;
        settings = WithDefaults(model, settings);
        SearchSettingsValidator.Validate(model, data, settings);
        progress?.Report(new SearchProgress(SearchStage.Reference, 0, 1));
        var options = SessionOptionsFor(settings, sessionOptions);
        var rounder = RounderFor(model, data, settings, options, cancellationToken);
        options = options with { Rounder = rounder };
        var raiseCheck = OpsetRaiseCheck.Verify(model, data, options.MaxBatch);
        using var session = OpenWithReference(model, data, options, store);
        progress?.Report(new SearchProgress(SearchStage.Reference, 1, 1));

        var trials = SensitivitySweep.Plan(model.Layers, settings, rounder.Compensates);
        var sweep = SensitivitySweep.Run(session, trials, store, progress, cancellationToken);

        cancellationToken.ThrowIfCancellationRequested();
        progress?.Report(new SearchProgress(SearchStage.Search, 0, 1));
        var problem = PlanningProblem.Build(model, settings, session.ReferenceMetrics, sweep, new ModelSizer(model, settings.Storage, activations: session.Activations, biasFileBytes: rounder.BiasFileBytes()), data.SampleCount);
        var frontier = KnapsackSolver.Frontier(problem.Layers);
        progress?.Report(new SearchProgress(SearchStage.Search, 1, 1));

        var validator = new AssignmentValidator(session, problem, store, progress, cancellationToken);
        var decision = settings.Budget switch
        {
            ErrorBudget error => validator.MeetErrorBudget(error, settings.Method),
            SizeBudget size => validator.MeetSizeBudget(size, settings.Method),
            _ => throw new EngineException("budget-invalid", "The budget must bound an error metric or the size."),
        };

        cancellationToken.ThrowIfCancellationRequested();
        progress?.Report(new SearchProgress(SearchStage.Export, 0, 1));
        var exported = decision.Chosen is { } chosen ? QdqExporter.Export(model, chosen.Assignment, session.Activations, rounder) : null;
        var heldOut = decision.Chosen is { } kept && holdout is not null ? MeasureHeldOut(model, holdout, options, session, kept) : null;
        var warnings = SearchWarnings.FewSamples(session.ReferenceOutputs, problem.Judge, settings.MetricSpace)
            .Concat(SearchWarnings.SilentOutputs(session.ReferenceOutputs, problem.Judge))
            .Concat(SearchWarnings.NonFiniteChoices(problem.NonFiniteChoices))
            .Concat(SearchWarnings.UncorrectedBiases(rounder.UncorrectedBiases, decision.Chosen?.Assignment)).ToList();
        if (SearchWarnings.Resolution(settings.Budget, session.ReferenceOutputs, problem.Judge, data.SampleCount, data.Labels?.Count) is { } resolution)
        {
            warnings.Add(resolution);
        }

        if (heldOut is not null && settings.Budget is ErrorBudget bound && decision.Chosen is { } best
            && SearchWarnings.HeldOutMisses(heldOut, bound, problem.Judge, problem.Judge.Value(best.Measured, session.ReferenceMetrics)) is { } miss)
        {
            warnings.Add(miss);
        }

        var report = new SearchReport(
            model, data, settings, session.ReferenceMetrics, problem, frontier, decision, exported, session.Activations, store.LoadAll().Count, raiseCheck, session.OutputAxes, heldOut, warnings, StorageAdvice.Describe(model, problem, decision, bitsGiven));
        var result = report.ToResult() with { SweepNote = session.SweepNote };
        progress?.Report(new SearchProgress(SearchStage.Export, 1, 1));
        return result;
    }

    /// <summary>
    /// The sensitivity trials a search on <paramref name="model"/> runs, in their order (a sweep's plan, for splitting it).
    /// With compensated rounding it counts every searched layer as compensable; the sweep may find fewer (a layer whose
    /// inputs were not gathered is measured with nearest rounding only).
    /// </summary>
    public static IReadOnlyList<SweepTrial> SweepPlan(OnnxModel model, SearchSettings settings)
    {
        ArgumentNullException.ThrowIfNull(model);
        return SensitivitySweep.Plan(model.Layers, WithDefaults(model, settings));
    }

    /// <summary>
    /// One part of a search's sweep, for spreading a search over several workers: stores the reference and the
    /// sensitivity trials of <paramref name="layers"/> only, under the same keys and measured in the same way as
    /// <see cref="Run"/> measures them, so a later <see cref="Run"/> finds them stored and goes straight on.
    /// </summary>
    /// <returns>How many trials the part holds (stored before or measured now).</returns>
    public static int SweepLayers(
        OnnxModel model,
        CalibrationSet data,
        SearchSettings settings,
        IReadOnlyCollection<string> layers,
        ITrialStore store,
        IProgress<SearchProgress>? progress,
        CancellationToken cancellationToken,
        TrialSessionOptions? sessionOptions = null)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(layers);
        settings = WithDefaults(model, settings);
        SearchSettingsValidator.Validate(model, data, settings);
        var options = SessionOptionsFor(settings, sessionOptions);
        // The same rounder as Run's (moments of every searched layer), so a part's integers are the ones Run would measure.
        var rounder = RounderFor(model, data, settings, options, cancellationToken);
        using var session = OpenWithReference(model, data, options with { Rounder = rounder }, store);
        var wanted = layers.ToHashSet(StringComparer.Ordinal);
        var trials = SensitivitySweep.Plan(model.Layers, settings, rounder.Compensates).Where(t => wanted.Contains(t.Layer.Name)).ToList();
        return SensitivitySweep.Run(session, trials, store, progress, cancellationToken).Count;
    }

    /// <summary>The settings with the default candidate widths for the storage and opset when none were given.</summary>
    private static SearchSettings WithDefaults(OnnxModel model, SearchSettings settings) =>
        settings.Bits.Count > 0 ? settings : settings with { Bits = CandidateWidths.Defaults(settings.Storage, model.Opset) };

    private static TrialSessionOptions SessionOptionsFor(SearchSettings settings, TrialSessionOptions? sessionOptions) =>
        (sessionOptions ?? new TrialSessionOptions()) with { Activations = SensitivitySweep.ActivationsFor(settings), MetricSpace = settings.MetricSpace };

    private static TrialSession OpenWithReference(OnnxModel model, CalibrationSet data, TrialSessionOptions options, ITrialStore store)
    {
        var session = TrialSession.Open(model, data, options);
        store.Save(new TrialRecord(TrialKeys.Reference, "reference", null, null, null, session.ReferenceMetrics, session.ForwardPassMilliseconds, new Dictionary<string, LayerSetting>()));
        return session;
    }

    /// <summary>
    /// The source of every weight's integers and corrected biases. With compensated rounding or bias correction asked for,
    /// the searched layers' input moments are gathered first, in one pass of the FP32 model over the calibration set (bounded like the activation cache).
    /// </summary>
    private static WeightRounder RounderFor(OnnxModel model, CalibrationSet data, SearchSettings settings, TrialSessionOptions options, CancellationToken cancellationToken)
    {
        if (!RoundingChoices.NeedsInputMoments(settings))
        {
            return new WeightRounder(model, new Dictionary<string, LayerInputs>(StringComparer.Ordinal));
        }

        var excluded = (settings.Excluded ?? []).ToHashSet(StringComparer.Ordinal);
        var searched = model.Layers.Where(l => !excluded.Contains(l.Name)).ToList();
        // Bias correction alone needs the inputs' means only; compensated rounding needs Σ x xᵀ too.
        var secondMoments = RoundingChoices.Asked(settings).Contains(RoundingMethod.Compensated);
        return WeightRounder.Gather(model, data, searched, secondMoments, settings.BiasCorrection, options.MaxBatch, options.MaxCachedActivationBytes, cancellationToken);
    }

    /// <summary>
    /// Runs the chosen assignment on the held-out set in a session of its own, with the activation scales
    /// calibrated on the calibration set (a held-out set must not calibrate what it checks).
    /// </summary>
    private static HeldOutCheck MeasureHeldOut(OnnxModel model, CalibrationSet holdout, TrialSessionOptions options, TrialSession calibration, AssignmentMeasurement chosen)
    {
        using var session = TrialSession.Open(model, holdout, options with { SuffixRuns = false, FixedActivations = calibration.Activations });
        return new HeldOutCheck(holdout.SampleCount, session.ReferenceMetrics, session.MeasureAssignment(chosen.Assignment));
    }
}

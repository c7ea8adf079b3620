using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Hosting;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Engine;

/// <summary>The real engine behind the service's port: loads uploads with the engine and runs searches.</summary>
internal sealed class EngineAdapter(IOptions<BitbudgetOptions> options) : ISearchEngine
{
    private DatasetLimits Limits => new(
        MaxTotalBytes: options.Value.MaxDatasetDecodedBytes,
        MaxArrayBytes: options.Value.MaxDatasetDecodedBytes);

    /// <summary>The session settings every run of this process uses (Bitbudget:OnnxThreads).</summary>
    private TrialSessionOptions SessionOptions => TrialOptions(options.Value);

    public ModelSummary InspectModel(byte[] bytes, string name)
    {
        var model = OnnxModel.Load(bytes, name);
        RuntimeModelCheck.Check(bytes, TimeSpan.FromSeconds(options.Value.ModelCheckSeconds));
        return new ModelSummary(
            model.Sha256,
            model.Name,
            bytes.LongLength,
            model.Opset,
            model.Inputs.Select(TensorSummary.From).ToList(),
            model.Outputs.Select(TensorSummary.From).ToList(),
            model.Layers.Select(LayerSummary.From).ToList(),
            model.Notes,
            model.Skipped);
    }

    public DatasetSummary InspectDataset(Stream dataset)
    {
        var arrays = DatasetReader.Inspect(dataset, Limits);
        var samples = arrays.Count == 0 ? 0 : arrays.Max(a => a.SampleCount);
        return new DatasetSummary(
            "",
            arrays.Select(a => new ArraySummary(a.Name, a.ElementType.ToString().ToLowerInvariant(), a.Shape)).ToList(),
            samples,
            arrays.Any(a => a.Name == CalibrationSet.LabelsName));
    }

    public void CheckCompatible(byte[] model, Stream dataset, long? targetOpset = null, IReadOnlyDictionary<string, int>? sampleAxes = null, bool inputMoments = false)
    {
        var loaded = OnnxModel.Load(model, "model", targetOpset);
        var headers = DatasetReader.Inspect(dataset, Limits, verifyData: false);
        // The job reads the dataset file whole before decoding it, so its size counts beside the estimate.
        var sessionOptions = new TrialSessionOptions();
        // Counted with Σ x xᵀ: an upper bound when bias correction alone gathers only the means.
        var moments = inputMoments ? LayerInputCollector.MomentBytes(loaded, loaded.Layers, sessionOptions.MaxCachedActivationBytes) : 0;
        SearchMemoryEstimate.Of(loaded, headers, sessionOptions.MaxCachedActivationBytes, heldBytes: dataset.Length, sampleAxes: sampleAxes, inputMomentBytes: moments)
            .Check(options.Value.MaxSearchMemoryBytes, "Bitbudget:MaxSearchMemoryBytes");
        dataset.Position = 0;
        var data = CalibrationSet.Create(DatasetReader.Read(dataset, Limits), loaded.Inputs, sampleAxes);
        // When the judged output's class count is in the graph, refuse labels beyond it now rather than at search start.
        if (loaded.Outputs is [{ Shape: [.., long classes] } judged, ..])
        {
            data.CheckLabels(classes, judged.Name);
        }
    }

    public SearchResult RunSearch(
        byte[] model,
        string modelName,
        byte[] dataset,
        SearchSettings settings,
        ITrialStore trials,
        IProgress<SearchProgress> progress,
        CancellationToken cancellationToken,
        byte[]? holdout = null)
    {
        var loaded = OnnxModel.Load(model, modelName, settings.TargetOpset);
        var data = CalibrationSet.Create(DatasetReader.Read(dataset, Limits), loaded.Inputs, settings.SampleAxes);
        var held = holdout is null ? null : CalibrationSet.Create(DatasetReader.Read(holdout, Limits), loaded.Inputs, settings.SampleAxes);
        return SearchRunner.Run(loaded, data, settings, trials, progress, cancellationToken, SessionOptions, holdout: held);
    }

    public IReadOnlyList<LayerTrials> PlanSweep(byte[] model, string modelName, SearchSettings settings) =>
        SearchRunner.SweepPlan(OnnxModel.Load(model, modelName, settings.TargetOpset), settings)
            .GroupBy(t => t.Layer.Name, StringComparer.Ordinal)
            .Select(g => new LayerTrials(g.Key, g.Count()))
            .ToList();

    public void SweepLayers(
        byte[] model,
        string modelName,
        byte[] dataset,
        SearchSettings settings,
        IReadOnlyCollection<string> layers,
        ITrialStore trials,
        CancellationToken cancellationToken)
    {
        var loaded = OnnxModel.Load(model, modelName, settings.TargetOpset);
        var data = CalibrationSet.Create(DatasetReader.Read(dataset, Limits), loaded.Inputs, settings.SampleAxes);
        SearchRunner.SweepLayers(loaded, data, settings, layers, trials, progress: null, cancellationToken, SessionOptions);
    }

    /// <summary>The trial-session knobs the service's settings decide; <see cref="Jobs.SearchJob"/> keys reused trials by the same.</summary>
    public static TrialSessionOptions TrialOptions(BitbudgetOptions settings) =>
        new() { IntraOpThreads = settings.OnnxThreads, MaxSweepMemoryBytes = settings.MaxSweepMemoryBytes };
}

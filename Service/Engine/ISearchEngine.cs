using Bitbudget.Search.Planning;

namespace Bitbudget.Service.Engine;

/// <summary>
/// The narrow port through which the service reaches the engine. Every method throws
/// <see cref="Bitbudget.Search.EngineException"/> for input the engine cannot work with; the service maps
/// its <c>Code</c> straight to a problem type.
/// </summary>
internal interface ISearchEngine
{
    /// <summary>Reads an uploaded ONNX model, checks that ONNX Runtime can load it, and lists what a search can work on.</summary>
    ModelSummary InspectModel(byte[] bytes, string name);

    /// <summary>Describes an uploaded .npz archive or single .npy array (a seekable stream) without holding its data.</summary>
    DatasetSummary InspectDataset(Stream dataset);

    /// <summary>
    /// Throws <c>search-too-large</c> when a search would need more memory than the service allows,
    /// <c>dataset-mismatch</c> when the dataset cannot feed the model's inputs, <c>dataset-labels-out-of-range</c>
    /// when a label is not a class of the model's first output, and the raise's codes
    /// (<c>opset-raise-*</c>) when <paramref name="targetOpset"/> is given and the model cannot be raised to it.
    /// </summary>
    /// <param name="sampleAxes">Sample axes given outright, by input name.</param>
    void CheckCompatible(byte[] model, Stream dataset, long? targetOpset = null, IReadOnlyDictionary<string, int>? sampleAxes = null, bool inputMoments = false);

    /// <summary>
    /// Runs a whole search. The engine loads what <paramref name="trials"/> already holds, skips those
    /// trials, and saves each new one as soon as it is measured, so a rerun duplicates nothing. A
    /// <paramref name="holdout"/> dataset, when given, is run through the chosen assignment at the end.
    /// </summary>
    SearchResult RunSearch(
        byte[] model,
        string modelName,
        byte[] dataset,
        SearchSettings settings,
        ITrialStore trials,
        IProgress<SearchProgress> progress,
        CancellationToken cancellationToken,
        byte[]? holdout = null);

    /// <summary>The layers a search's sensitivity sweep measures, in its order, with how many trials each takes.</summary>
    IReadOnlyList<LayerTrials> PlanSweep(byte[] model, string modelName, SearchSettings settings);

    /// <summary>
    /// Measures and stores the reference and the sensitivity trials of <paramref name="layers"/> only: one part of
    /// a search spread over several workers. The trials are those <see cref="RunSearch"/> would store for these
    /// layers (same keys, same measurement), so the final <see cref="RunSearch"/> finds them and measures them no more.
    /// </summary>
    void SweepLayers(
        byte[] model,
        string modelName,
        byte[] dataset,
        SearchSettings settings,
        IReadOnlyCollection<string> layers,
        ITrialStore trials,
        CancellationToken cancellationToken);
}

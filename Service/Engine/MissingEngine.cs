using Bitbudget.Search;
using Bitbudget.Search.Planning;

namespace Bitbudget.Service.Engine;

/// <summary>
/// Registered until the engine adapter is wired in: every call fails with a clear, non-retryable
/// <c>engine-unavailable</c> error instead of pretending to work.
/// </summary>
internal sealed class MissingEngine : ISearchEngine
{
    public ModelSummary InspectModel(byte[] bytes, string name) => throw Unavailable();

    public DatasetSummary InspectDataset(byte[] bytes) => throw Unavailable();

    public void CheckCompatible(byte[] model, byte[] dataset) => throw Unavailable();

    public SearchResult RunSearch(
        byte[] model,
        string modelName,
        byte[] dataset,
        SearchSettings settings,
        ITrialStore trials,
        IProgress<SearchProgress> progress,
        CancellationToken cancellationToken) => throw Unavailable();

    private static EngineException Unavailable() =>
        new("engine-unavailable", "This build of the service has no search engine wired in; use a build that registers the engine adapter.");
}

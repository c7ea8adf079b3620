using System.Text;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Jobs;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Searches;

/// <summary>Accepting, listing and canceling searches: everything between the HTTP handlers and the store.</summary>
internal sealed partial class SearchService(
    CatalogStore catalog,
    SearchStore searches,
    BlobStore blobs,
    ISearchEngine engine,
    SearchQueue queue,
    SearchCancellations cancellations,
    ILogger<SearchService> logger)
{
    /// <summary>Validates the request, stores the search and queues its job; a known idempotency key returns the stored search.</summary>
    /// <returns>The search and whether this call created it.</returns>
    public (SearchRecord Search, bool Created) Submit(SearchRequest request, string? idempotencyKey)
    {
        if (string.IsNullOrWhiteSpace(request.ModelId))
        {
            throw ServiceException.Invalid("modelId", "modelId is required: the id POST /v1/models returned.");
        }

        if (string.IsNullOrWhiteSpace(request.DatasetId))
        {
            throw ServiceException.Invalid("datasetId", "datasetId is required: the id POST /v1/datasets returned.");
        }

        var model = catalog.FindModel(request.ModelId)
            ?? throw new ServiceException(StatusCodes.Status404NotFound, ProblemTypes.NotFound, $"No model has the id '{request.ModelId}'; upload it with POST /v1/models first.");
        var dataset = catalog.FindDataset(request.DatasetId)
            ?? throw new ServiceException(StatusCodes.Status404NotFound, ProblemTypes.NotFound, $"No dataset has the id '{request.DatasetId}'; upload it with POST /v1/datasets first.");
        var holdout = string.IsNullOrWhiteSpace(request.HoldoutDatasetId)
            ? null
            : catalog.FindDataset(request.HoldoutDatasetId)
                ?? throw new ServiceException(StatusCodes.Status404NotFound, ProblemTypes.NotFound, $"No dataset has the id '{request.HoldoutDatasetId}' (holdoutDatasetId); upload it with POST /v1/datasets first.");
        var spec = SearchRequestValidator.Validate(request, model, dataset, holdout);
        var requestHash = BlobStore.Sha256Hex(Encoding.UTF8.GetBytes($"{model.Id}\n{dataset.Id}\n{StoreJson.Write(spec)}"));

        if (idempotencyKey is not null && searches.FindByIdempotencyKey(idempotencyKey) is { } earlier)
        {
            return (CheckSameRequest(earlier, requestHash), false);
        }

        // Compensated rounding and bias correction hold every layer's input moments: the memory check counts them.
        var inputMoments = Search.Planning.RoundingChoices.NeedsInputMoments(SearchVocabulary.ToSettings(spec));
        using (var datasetFile = File.OpenRead(blobs.PathOf(dataset.Summary.Sha256)))
        {
            engine.CheckCompatible(blobs.Read(model.Summary.Sha256), datasetFile, spec.TargetOpset, spec.SampleAxes, inputMoments);
        }

        if (holdout is not null)
        {
            using var holdoutFile = File.OpenRead(blobs.PathOf(holdout.Summary.Sha256));
            engine.CheckCompatible(blobs.Read(model.Summary.Sha256), holdoutFile, spec.TargetOpset, spec.SampleAxes, inputMoments);
        }

        var (search, created) = searches.Create(model.Id, dataset.Id, spec, idempotencyKey, requestHash);
        if (!created)
        {
            return (CheckSameRequest(search, requestHash), false);
        }

        var jobId = queue.Enqueue(search.Id);
        searches.SetJobId(search.Id, jobId);
        LogQueued(logger, search.Id, model.Id, jobId);
        return (searches.Find(search.Id)!, true);
    }

    /// <summary>Cancels a queued or running search; its trials stay stored.</summary>
    public SearchRecord Cancel(SearchRecord search)
    {
        if (!searches.Cancel(search.Id))
        {
            var current = searches.Find(search.Id)!;
            throw new ServiceException(
                StatusCodes.Status409Conflict,
                ProblemTypes.SearchFinished,
                $"Search {search.Id} has already {current.State}; there is nothing to cancel.");
        }

        cancellations.Cancel(search.Id);
        if (search.JobId is not null)
        {
            queue.Delete(search.JobId);
        }

        LogCanceled(logger, search.Id);
        return searches.Find(search.Id)!;
    }

    private static SearchRecord CheckSameRequest(SearchRecord search, string requestHash) =>
        search.RequestHash == requestHash
            ? search
            : throw new ServiceException(
                StatusCodes.Status422UnprocessableEntity,
                ProblemTypes.IdempotencyKeyReused,
                $"This Idempotency-Key was already used for search {search.Id} with a different request; send a new key for a new search.");

    [LoggerMessage(EventId = 2000, Level = LogLevel.Information, Message = "Queued search {SearchId} for model {ModelId} as job {JobId}")]
    private static partial void LogQueued(ILogger logger, string searchId, string modelId, string jobId);

    [LoggerMessage(EventId = 2001, Level = LogLevel.Information, Message = "Canceled search {SearchId}")]
    private static partial void LogCanceled(ILogger logger, string searchId);
}

using System.Globalization;
using System.Text.Json;
using Bitbudget.Search.Manifest;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;
using Microsoft.AspNetCore.Http.HttpResults;
using Microsoft.AspNetCore.Http.Json;
using Microsoft.Extensions.Options;
using Microsoft.Net.Http.Headers;

namespace Bitbudget.Service.Api;

/// <summary>/v1/searches: start, watch and cancel searches, and download what they produce.</summary>
internal static class SearchesApi
{
    private const int DefaultTrialPage = 100;
    private const int MaxTrialPage = 1000;
    private const int MaxListed = 500;

    public static IEndpointRouteBuilder MapSearchesApi(this IEndpointRouteBuilder app)
    {
        var group = app.MapGroup("/v1/searches").WithTags("Searches").RequireAuthorization();
        group.MapPost("/", Start)
            .WithName("StartSearch")
            .WithSummary("Queue a search for the smallest bit-width assignment inside a budget; an Idempotency-Key header makes retries safe")
            .Accepts<SearchRequest>("application/json")
            .ProducesProblem(StatusCodes.Status400BadRequest)
            .ProducesProblem(StatusCodes.Status404NotFound)
            .ProducesProblem(StatusCodes.Status422UnprocessableEntity);
        group.MapGet("/", List).WithName("ListSearches").WithSummary("Searches, newest first, optionally for one model (?modelId=) or for every version of a model name (?name=)");
        group.MapGet("/{id}", Get).WithName("GetSearch").WithSummary("A search's state, stage, progress and, once done, its summary");
        group.MapDelete("/{id}", Cancel).WithName("CancelSearch").WithSummary("Cancel a queued or running search; its trials are kept");
        group.MapGet("/{id}/manifest", Manifest).WithName("GetSearchManifest").WithSummary("The assignment manifest (JSON, with an ETag)");
        group.MapGet("/{id}/model", QuantizedModel).WithName("GetSearchModel").WithSummary("The quantized ONNX model");
        group.MapGet("/{id}/sensitivity", Sensitivity).WithName("GetSearchSensitivity").WithSummary("Per-layer, per-bit-width sensitivity table (CSV)");
        group.MapGet("/{id}/frontier", Frontier).WithName("GetSearchFrontier").WithSummary("The size-vs-error Pareto frontier (JSON)");
        group.MapGet("/{id}/compare/{other}", Compare)
            .WithName("CompareSearches")
            .WithSummary("Two succeeded searches side by side: per layer (matched by name, then by weight shape) the chosen bits, the sensitivity at each width and the change; plus the totals")
            .ProducesProblem(StatusCodes.Status404NotFound)
            .ProducesProblem(StatusCodes.Status409Conflict);
        group.MapGet("/{id}/trials", Trials).WithName("GetSearchTrials").WithSummary("Every trial the search's result rests on, measured or reused from an earlier search (reusedFrom), in the order stored, one page at a time");
        return app;
    }

    public static async Task<Accepted<SearchResponse>> Start(
        HttpRequest request,
        SearchService service,
        SearchStore store,
        IOptions<JsonOptions> json,
        CancellationToken cancellationToken)
    {
        SearchRequest? body;
        try
        {
            var strict = new JsonSerializerOptions(json.Value.SerializerOptions) { UnmappedMemberHandling = System.Text.Json.Serialization.JsonUnmappedMemberHandling.Disallow };
            body = await JsonSerializer.DeserializeAsync<SearchRequest>(request.Body, strict, cancellationToken).ConfigureAwait(false);
        }
        catch (JsonException e)
        {
            throw JsonBodyError.From(e, typeof(SearchRequest), "search request");
        }

        if (body is null)
        {
            throw ServiceException.Invalid("body", "The body must be a JSON object with modelId, datasetId and budget.");
        }

        string? key = request.Headers["Idempotency-Key"];
        if (key is { Length: > 200 })
        {
            throw ServiceException.Invalid("Idempotency-Key", "The Idempotency-Key header is longer than 200 characters.");
        }

        var (search, _) = service.Submit(body, string.IsNullOrWhiteSpace(key) ? null : key.Trim());
        return TypedResults.Accepted($"/v1/searches/{search.Id}", SearchResponse.From(search, store.FindResult(search.Id)));
    }

    public static Results<Ok<SearchResponse[]>, ProblemHttpResult> List(string? modelId, string? name, int? limit, SearchStore store)
    {
        if (limit is < 1 or > MaxListed)
        {
            return ProblemResults.Of(400, ProblemTypes.InvalidRequest, $"limit must lie between 1 and {MaxListed}.");
        }

        var searches = string.IsNullOrWhiteSpace(name)
            ? store.List(modelId, limit ?? 50)
            : store.ListForModelName(name.Trim(), limit ?? 50).Where(s => modelId is null || s.ModelId == modelId).ToList();
        return TypedResults.Ok(searches.Select(s => SearchResponse.From(s, store.FindResult(s.Id))).ToArray());
    }

    public static Results<Ok<SearchResponse>, ProblemHttpResult> Get(string id, SearchStore store) =>
        store.Find(id) is { } search ? TypedResults.Ok(SearchResponse.From(search, store.FindResult(id))) : ProblemResults.NotFound("search", id);

    public static Results<Ok<SearchResponse>, ProblemHttpResult> Cancel(string id, SearchStore store, SearchService service)
    {
        if (store.Find(id) is not { } search)
        {
            return ProblemResults.NotFound("search", id);
        }

        return TypedResults.Ok(SearchResponse.From(service.Cancel(search), null));
    }

    public static Results<FileContentHttpResult, ProblemHttpResult> Manifest(string id, SearchStore store, BlobStore blobs) =>
        Artifact(id, store, blobs, r => r.ManifestSha256, "application/json", null);

    public static Results<FileContentHttpResult, ProblemHttpResult> QuantizedModel(string id, SearchStore store, BlobStore blobs, CatalogStore catalog)
    {
        if (store.FindResult(id) is { ModelSha256: null } result)
        {
            return ProblemResults.Of(
                StatusCodes.Status409Conflict,
                ProblemTypes.BudgetInfeasible,
                $"Search {id} wrote no quantized model because the budget cannot be met: {result.Message}");
        }

        var name = store.Find(id) is { } search && catalog.FindModel(search.ModelId) is { } model
            ? Path.GetFileNameWithoutExtension(model.Summary.Name) + ".quantized.onnx"
            : "model.quantized.onnx";
        return Artifact(id, store, blobs, r => r.ModelSha256!, "application/octet-stream", name);
    }

    public static Results<FileContentHttpResult, ProblemHttpResult> Sensitivity(string id, SearchStore store, BlobStore blobs) =>
        Artifact(id, store, blobs, r => r.SensitivitySha256, "text/csv; charset=utf-8", null);

    public static Results<FileContentHttpResult, ProblemHttpResult> Frontier(string id, SearchStore store, BlobStore blobs) =>
        Artifact(id, store, blobs, r => r.FrontierSha256, "application/json", null);

    public static Results<Ok<ComparisonResponse>, ProblemHttpResult> Compare(string id, string other, SearchStore store, CatalogStore catalog, BlobStore blobs)
    {
        var found = new List<(SearchRecord Search, ResultRecord Result)>();
        foreach (var searchId in new[] { id, other })
        {
            if (store.Find(searchId) is not { } search)
            {
                return ProblemResults.NotFound("search", searchId);
            }

            if (search.State != SearchStates.Succeeded || store.FindResult(searchId) is not { } result)
            {
                return ProblemResults.Of(StatusCodes.Status409Conflict, ProblemTypes.SearchNotReady, NotReadyDetail(search) + " Only succeeded searches can be compared.");
            }

            found.Add((search, result));
        }

        var sides = found.Select(f => (f.Search, f.Result, Manifest: ManifestJson.Deserialize(blobs.Read(f.Result.ManifestSha256)), Model: catalog.FindModel(f.Search.ModelId))).ToList();
        var layers = LayerMatcher.Compare(sides[0].Manifest.Layers, sides[1].Manifest.Layers);
        var (a, b) = (sides[0], sides[1]);
        return TypedResults.Ok(new ComparisonResponse(
            Side(a.Search, a.Result, a.Manifest, a.Model, catalog),
            Side(b.Search, b.Result, b.Manifest, b.Model, catalog),
            a.Manifest.Model.Name == b.Manifest.Model.Name,
            layers,
            new ComparisonTotals(
                ComparedValue.Of(a.Result.Bytes, b.Result.Bytes),
                ComparedValue.Of(a.Result.ModelFileBytes, b.Result.ModelFileBytes),
                ComparedValue.Of(a.Result.AverageBits, b.Result.AverageBits),
                ComparedValue.Of(a.Result.Measured, b.Result.Measured),
                ComparedValue.Of(a.Manifest.Layers.Sum(l => l.Parameters), b.Manifest.Layers.Sum(l => l.Parameters)),
                layers.Count(l => l.Status == "changed"),
                layers.Count(l => l.Status == "added"),
                layers.Count(l => l.Status == "removed"))));
    }

    private static ComparedSearch Side(SearchRecord search, ResultRecord result, AssignmentManifest manifest, ModelRecord? model, CatalogStore catalog) => new(
        search.Id,
        search.ModelId,
        manifest.Model.Name,
        model is null ? 1 : ModelVersions.Of(model, catalog),
        manifest.Budget.Metric,
        result.Feasible,
        result.Measured);

    public static Results<Ok<TrialPageResponse>, ProblemHttpResult> Trials(string id, int? offset, int? limit, SearchStore store, Database database)
    {
        if (store.Find(id) is null)
        {
            return ProblemResults.NotFound("search", id);
        }

        if (offset is < 0 || limit is < 1 or > MaxTrialPage)
        {
            return ProblemResults.Of(400, ProblemTypes.InvalidRequest, $"offset must be 0 or more and limit between 1 and {MaxTrialPage}.");
        }

        var (start, size) = (offset ?? 0, limit ?? DefaultTrialPage);
        var (total, reused, items) = new TrialStore(database, id).Page(start, size);
        return TypedResults.Ok(new TrialPageResponse(total, total - reused, reused, start, size, items));
    }

    /// <summary>Serves one stored artifact with its SHA-256 as a strong ETag (If-None-Match gives 304), or says why it is not there yet.</summary>
    private static Results<FileContentHttpResult, ProblemHttpResult> Artifact(
        string id, SearchStore store, BlobStore blobs, Func<ResultRecord, string> pick, string contentType, string? downloadName)
    {
        if (store.Find(id) is not { } search)
        {
            return ProblemResults.NotFound("search", id);
        }

        if (search.State != SearchStates.Succeeded || store.FindResult(id) is not { } result)
        {
            return ProblemResults.Of(StatusCodes.Status409Conflict, ProblemTypes.SearchNotReady, NotReadyDetail(search));
        }

        var sha = pick(result);
        return TypedResults.File(blobs.Read(sha), contentType, downloadName, entityTag: new EntityTagHeaderValue($"\"{sha}\""));
    }

    private static string NotReadyDetail(SearchRecord search) => search.State switch
    {
        SearchStates.Queued => $"Search {search.Id} is queued; its artifacts appear once it has succeeded. Poll GET /v1/searches/{search.Id}.",
        SearchStates.Running => string.Create(
            CultureInfo.InvariantCulture,
            $"Search {search.Id} is running (stage {search.Stage ?? "reference"}, {search.Done} of {search.Total}); its artifacts appear once it has succeeded."),
        SearchStates.Failed => $"Search {search.Id} failed ({search.ErrorCode}: {search.ErrorMessage}), so it has no artifacts.",
        _ => $"Search {search.Id} was canceled, so it has no artifacts; its trials are kept at /v1/searches/{search.Id}/trials.",
    };
}

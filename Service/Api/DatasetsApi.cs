using Bitbudget.Service.Hosting;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Store;
using Bitbudget.Service.Uploads;
using Microsoft.AspNetCore.Http.HttpResults;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Api;

/// <summary>/v1/datasets: upload a calibration set (.npz, or one .npy array).</summary>
internal static class DatasetsApi
{
    public static IEndpointRouteBuilder MapDatasetsApi(this IEndpointRouteBuilder app)
    {
        var group = app.MapGroup("/v1/datasets").WithTags("Datasets").RequireAuthorization();
        group.MapPost("/", Upload)
            .WithName("UploadDataset")
            .WithSummary("Upload a calibration set as .npz (one array per model input, optional 'labels') or a single .npy")
            .Accepts<byte[]>("application/octet-stream")
            .ProducesProblem(StatusCodes.Status400BadRequest)
            .ProducesProblem(StatusCodes.Status413PayloadTooLarge)
            .ProducesProblem(StatusCodes.Status422UnprocessableEntity);
        group.MapGet("/{id}", Get).WithName("GetDataset").WithSummary("A dataset's arrays, sample count and whether it has labels");
        return app;
    }

    public static async Task<Results<Created<DatasetResponse>, Ok<DatasetResponse>>> Upload(
        HttpRequest request,
        UploadService uploads,
        BlobStore blobs,
        IOptions<BitbudgetOptions> options,
        CancellationToken cancellationToken)
    {
        using var upload = await BodyReader.StageAsync(request, blobs, options.Value.MaxDatasetBytes, "dataset", cancellationToken).ConfigureAwait(false);
        var (dataset, created) = uploads.AddDataset(upload);
        var response = DatasetResponse.From(dataset);
        return created ? TypedResults.Created($"/v1/datasets/{dataset.Id}", response) : TypedResults.Ok(response);
    }

    public static Results<Ok<DatasetResponse>, ProblemHttpResult> Get(string id, CatalogStore catalog) =>
        catalog.FindDataset(id) is { } dataset ? TypedResults.Ok(DatasetResponse.From(dataset)) : ProblemResults.NotFound("dataset", id);
}

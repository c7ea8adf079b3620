using Bitbudget.Service.Hosting;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Store;
using Bitbudget.Service.Uploads;
using Microsoft.AspNetCore.Http.HttpResults;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Api;

/// <summary>/v1/models: upload an ONNX model (content-addressed) and read what was found in it.</summary>
internal static class ModelsApi
{
    public static IEndpointRouteBuilder MapModelsApi(this IEndpointRouteBuilder app)
    {
        var group = app.MapGroup("/v1/models").WithTags("Models").RequireAuthorization();
        group.MapPost("/", Upload)
            .WithName("UploadModel")
            .WithSummary("Upload an FP32 ONNX model; the same bytes always give the same model")
            .Accepts<byte[]>("application/octet-stream")
            .ProducesProblem(StatusCodes.Status400BadRequest)
            .ProducesProblem(StatusCodes.Status413PayloadTooLarge)
            .ProducesProblem(StatusCodes.Status422UnprocessableEntity);
        group.MapGet("/", List).WithName("ListModels").WithSummary("List uploaded models, newest first; ?name= lists the versions of one model name");
        group.MapGet("/{id}", Get).WithName("GetModel").WithSummary("A model's inputs, outputs and quantizable layers");
        return app;
    }

    public static async Task<Results<Created<ModelResponse>, Ok<ModelResponse>>> Upload(
        HttpRequest request,
        string? name,
        UploadService uploads,
        BlobStore blobs,
        CatalogStore catalog,
        IOptions<BitbudgetOptions> options,
        CancellationToken cancellationToken)
    {
        using var upload = await BodyReader.StageAsync(request, blobs, options.Value.MaxModelBytes, "model", cancellationToken).ConfigureAwait(false);
        var (model, created) = uploads.AddModel(upload, name);
        var response = ModelResponse.From(model, ModelVersions.Of(model, catalog));
        return created ? TypedResults.Created($"/v1/models/{model.Id}", response) : TypedResults.Ok(response);
    }

    public static Ok<ModelResponse[]> List(string? name, CatalogStore catalog)
    {
        var models = catalog.ListModels(string.IsNullOrWhiteSpace(name) ? null : name.Trim());
        var versions = ModelVersions.Of(models);
        return TypedResults.Ok(models.Select(m => ModelResponse.From(m, versions[m.Id])).ToArray());
    }

    public static Results<Ok<ModelResponse>, ProblemHttpResult> Get(string id, CatalogStore catalog) =>
        catalog.FindModel(id) is { } model ? TypedResults.Ok(ModelResponse.From(model, ModelVersions.Of(model, catalog))) : ProblemResults.NotFound("model", id);
}

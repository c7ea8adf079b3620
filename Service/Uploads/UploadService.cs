using System.Globalization;
using Bitbudget.Search;
using Bitbudget.Service.Engine;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Store;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Uploads;

/// <summary>
/// Accepts model and dataset uploads: the same bytes always give the same stored resource, and only
/// content the engine can read is kept.
/// </summary>
internal sealed class UploadService(CatalogStore catalog, BlobStore blobs, ISearchEngine engine, IOptions<BitbudgetOptions> options)
{
    public (ModelRecord Model, bool Created) AddModel(StagedUpload upload, string? name)
    {
        var sha = upload.Sha256;
        if (catalog.FindModelBySha(sha) is { } known)
        {
            return (known, false);
        }

        ModelSummary summary;
        try
        {
            // The ONNX parser needs the whole file; this is the one in-memory copy, dropped as soon as the model is checked.
            summary = engine.InspectModel(upload.ReadAllBytes(), string.IsNullOrWhiteSpace(name) ? "model.onnx" : name.Trim());
        }
        finally
        {
            LargeUploadMemory.Release(upload.Length);
        }

        var maxLayers = options.Value.MaxLayers;
        if (summary.Layers.Count > maxLayers)
        {
            throw new EngineException(
                "model-too-many-layers",
                $"The model has {summary.Layers.Count.ToString(CultureInfo.InvariantCulture)} quantizable layers and this service accepts at most {maxLayers.ToString(CultureInfo.InvariantCulture)}; exclude part of the model or raise Bitbudget:MaxLayers.");
        }

        blobs.PutStaged(upload.Path, sha);
        return catalog.AddModel(summary with { Sha256 = sha, Bytes = upload.Length });
    }

    public (DatasetRecord Dataset, bool Created) AddDataset(StagedUpload upload)
    {
        var sha = upload.Sha256;
        if (catalog.FindDatasetBySha(sha) is { } known)
        {
            return (known, false);
        }

        DatasetSummary summary;
        using (var stream = upload.Open())
        {
            summary = engine.InspectDataset(stream);
        }

        var maxSamples = options.Value.MaxDatasetSamples;
        if (summary.Samples > maxSamples)
        {
            throw new EngineException(
                "dataset-too-many-samples",
                $"The dataset has {summary.Samples.ToString(CultureInfo.InvariantCulture)} samples and this service accepts at most {maxSamples.ToString(CultureInfo.InvariantCulture)}; a few hundred samples usually calibrate well (common practice).");
        }

        blobs.PutStaged(upload.Path, sha);
        return catalog.AddDataset(summary with { Sha256 = sha }, upload.Length);
    }
}

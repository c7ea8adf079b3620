using System.Security.Cryptography;
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

    public ModelSummary InspectModel(byte[] bytes, string name)
    {
        var model = OnnxModel.Load(bytes, name);
        return new ModelSummary(
            model.Sha256,
            model.Name,
            bytes.LongLength,
            model.Opset,
            model.Inputs.Select(Tensor).ToList(),
            model.Outputs.Select(Tensor).ToList(),
            model.Layers.Select(l => new LayerSummary(l.Name, l.Op, l.WeightName, l.Shape, l.ParameterCount, l.ChannelAxis, l.FollowedByBatchNorm)).ToList(),
            model.Notes,
            model.Skipped);
    }

    public DatasetSummary InspectDataset(byte[] bytes)
    {
        var arrays = DatasetReader.Read(bytes, Limits);
        var samples = arrays.Count == 0 ? 0 : arrays.Max(a => a.SampleCount);
        return new DatasetSummary(
            Convert.ToHexStringLower(SHA256.HashData(bytes)),
            arrays.Select(a => new ArraySummary(a.Name, a.ElementType.ToString().ToLowerInvariant(), a.Shape)).ToList(),
            samples,
            arrays.Any(a => a.Name == CalibrationSet.LabelsName));
    }

    public void CheckCompatible(byte[] model, byte[] dataset, long? targetOpset = null) =>
        CalibrationSet.Create(DatasetReader.Read(dataset, Limits), OnnxModel.Load(model, "model", targetOpset).Inputs);

    public SearchResult RunSearch(
        byte[] model,
        string modelName,
        byte[] dataset,
        SearchSettings settings,
        ITrialStore trials,
        IProgress<SearchProgress> progress,
        CancellationToken cancellationToken)
    {
        var loaded = OnnxModel.Load(model, modelName, settings.TargetOpset);
        var data = CalibrationSet.Create(DatasetReader.Read(dataset, Limits), loaded.Inputs);
        return SearchRunner.Run(loaded, data, settings, trials, progress, cancellationToken);
    }

    private static TensorSummary Tensor(Bitbudget.Search.ValueDescription value) =>
        new(value.Name, value.ElementType.ToString().ToLowerInvariant(), value.Shape);
}

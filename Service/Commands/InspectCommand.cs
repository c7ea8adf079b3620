using System.CommandLine;
using System.Globalization;
using System.Text;
using System.Text.Json;
using Bitbudget.Search;
using Bitbudget.Search.Onnx;
using Bitbudget.Service.Engine;

namespace Bitbudget.Service.Commands;

/// <summary><c>inspect MODEL.onnx [--json]</c>: loads a model as an upload would be and prints its layer table.</summary>
internal static class InspectCommand
{
    public static readonly IReadOnlyList<string> Examples =
    [
        $"{CommandLine.ProgramName} inspect demo/hive-monitor.onnx",
        $"{CommandLine.ProgramName} inspect demo/hive-monitor.onnx --json > layers.json",
    ];

    private static readonly JsonSerializerOptions Json = new(JsonSerializerDefaults.Web) { WriteIndented = true };

    public static Command Create()
    {
        var model = new Argument<string>("MODEL.onnx") { Description = "The FP32 ONNX model to read." };
        var json = new Option<bool>("--json") { Description = "Print JSON instead of the table." };
        var inspect = new Command("inspect", "Loads a model as a search would and prints its layers (the weights it will quantize), the weights that stay FP32 and why, and notes.")
        {
            model,
            json,
        };
        inspect.SetAction(result => Run(result.GetRequiredValue(model), result.GetValue(json)));
        return inspect;
    }

    private static int Run(string path, bool json)
    {
        OnnxModel model;
        try
        {
            model = OnnxModel.LoadFile(path);
        }
        catch (EngineException ex)
        {
            Console.Error.WriteLine($"error: {ex.Message}");
            return ExitCodes.BadFile;
        }

        Console.Out.Write(json ? ToJson(model) : ToTable(model));
        return ExitCodes.Done;
    }

    private static string ToJson(OnnxModel model)
    {
        var document = new
        {
            model.Name,
            model.Sha256,
            model.Opset,
            model.IrVersion,
            // The API's names (GET /v1/models/{id}): weight, parameters, lowercase element types.
            Inputs = model.Inputs.Select(TensorSummary.From),
            Outputs = model.Outputs.Select(TensorSummary.From),
            Layers = model.Layers.Select(l => new
            {
                l.Name,
                l.Op,
                Weight = l.WeightName,
                l.Shape,
                Parameters = l.ParameterCount,
                l.ChannelAxis,
                BatchNormFolded = l.FollowedByBatchNorm,
                l.Consumers,
            }),
            Totals = new { Layers = model.Layers.Count, Parameters = model.Layers.Sum(l => l.ParameterCount) },
            model.Skipped,
            Coverage = CoverageNote,
            model.Notes,
        };
        return JsonSerializer.Serialize(document, Json) + Environment.NewLine;
    }

    private static string ToTable(OnnxModel model)
    {
        var text = new StringBuilder();
        var c = CultureInfo.InvariantCulture;
        text.AppendLine(c, $"model   {model.Name}");
        text.AppendLine(c, $"sha256  {model.Sha256}");
        text.AppendLine(c, $"opset   {model.Opset} (IR version {model.IrVersion})");
        foreach (var input in model.Inputs)
        {
            text.AppendLine(c, $"input   {Describe(input)}");
        }

        foreach (var output in model.Outputs)
        {
            text.AppendLine(c, $"output  {Describe(output)}");
        }

        text.AppendLine();
        string[] header = ["name", "op", "weight", "shape", "params", "axis", "bn folded"];
        var rows = model.Layers.Select(l => new[]
        {
            l.Consumers.Count > 1 ? $"{l.Name} (+{l.Consumers.Count - 1} tied)" : l.Name,
            l.Op,
            l.WeightName,
            "[" + string.Join(",", l.Shape) + "]",
            l.ParameterCount.ToString("N0", c),
            l.ChannelAxis.ToString(c),
            l.FollowedByBatchNorm ? "yes" : "no",
        }).ToList();
        var widths = header.Select((h, i) => rows.Select(r => r[i].Length).Append(h.Length).Max()).ToArray();
        text.AppendLine(Row(header, widths));
        foreach (var row in rows)
        {
            text.AppendLine(Row(row, widths));
        }

        text.AppendLine();
        text.AppendLine(c, $"total   {model.Layers.Count} layers, {model.Layers.Sum(l => l.ParameterCount).ToString("N0", c)} parameters");
        if (model.Skipped.Count > 0)
        {
            text.AppendLine();
            text.AppendLine(c, $"skipped {model.Skipped.Count} weights stay FP32 ({model.Skipped.Sum(s => s.Parameters).ToString("N0", c)} parameters):");
            foreach (var skipped in model.Skipped)
            {
                text.AppendLine(c, $"  {skipped.Node} ({skipped.Op}, {skipped.Parameters.ToString("N0", c)} parameters): {skipped.Reason}");
            }

            text.AppendLine();
        }

        text.AppendLine(c, $"coverage {CoverageNote}");
        foreach (var note in model.Notes)
        {
            text.AppendLine(c, $"note    {note}");
        }

        return text.ToString();
    }

    /// <summary>
    /// Whether the calibration data reaches a layer is only known from its trials (does quantizing it change any
    /// output?), so inspect, which runs nothing, says where to find it.
    /// </summary>
    private const string CoverageNote =
        "judged at search time: plan and the search summary name every layer the calibration set does not exercise (see README, \"Not exercised\").";

    private static string Row(string[] cells, int[] widths) =>
        string.Join("  ", cells.Select((cell, i) => i == 4 ? cell.PadLeft(widths[i]) : cell.PadRight(widths[i]))).TrimEnd();

    private static string Describe(ValueDescription value) =>
        $"{value.Name} {value.ElementType} [{string.Join(",", value.Shape.Select(d => d?.ToString(CultureInfo.InvariantCulture) ?? "?"))}]";
}

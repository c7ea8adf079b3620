using System.Text.RegularExpressions;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Builds an uploaded model once in an ONNX Runtime session (CPU, no graph optimisation, one thread, no
/// memory arena) so that what the runtime cannot load (unknown operators, shapes that do not fit, a
/// future opset) is refused at upload, naming the node, rather than when a search first runs it. The
/// build runs on a worker and is given up after a time limit; memory is bounded by the upload's size
/// limit, since building a session holds little more than the model's weights.
/// </summary>
public static partial class RuntimeModelCheck
{
    /// <summary>Builds the session; throws <see cref="EngineException"/> (<c>model-invalid</c>, <c>model-unsupported-operator</c>, <c>model-check-timeout</c>).</summary>
    public static void Check(byte[] bytes, TimeSpan timeout)
    {
        ArgumentNullException.ThrowIfNull(bytes);
        var build = Task.Run(() => Build(bytes));
        bool finished;
        try
        {
            finished = build.Wait(timeout);
        }
        catch (AggregateException ex) when (ex.InnerException is OnnxRuntimeException ort)
        {
            throw Refusal(ort.Message, ort);
        }

        if (!finished)
        {
            // ONNX Runtime cannot cancel a session build; it finishes on its worker and is disposed there.
            throw new EngineException(
                "model-check-timeout",
                $"ONNX Runtime did not finish loading the model within {timeout.TotalSeconds:0.#} s; a model this service can search loads in well under a second, so check that the file is the model you meant.");
        }
    }

    private static void Build(byte[] bytes)
    {
        using var options = new SessionOptions
        {
            GraphOptimizationLevel = GraphOptimizationLevel.ORT_DISABLE_ALL,
            IntraOpNumThreads = 1,
            InterOpNumThreads = 1,
            ExecutionMode = ExecutionMode.ORT_SEQUENTIAL,
            EnableCpuMemArena = false,
        };
        using var session = new InferenceSession(bytes, options);
    }

    /// <summary>Turns ONNX Runtime's load error into a refusal that names the node where the runtime says which.</summary>
    internal static EngineException Refusal(string message, Exception? inner = null)
    {
        var reason = Reason(message);
        var node = NodeName(message);
        var where = node is null ? "" : $" at node '{node}'";
        var unsupported = message.Contains("No Op registered", StringComparison.Ordinal)
            || message.Contains("is not a registered function/op", StringComparison.Ordinal)
            || message.Contains("No opset import for domain", StringComparison.Ordinal);
        return unsupported
            ? new EngineException(
                "model-unsupported-operator",
                $"ONNX Runtime cannot run the model{where}: {reason}. Export the model with standard ONNX operators only.",
                inner)
            : new EngineException(
                "model-invalid",
                $"ONNX Runtime refused the model{where}: {reason}. Re-export the model and check it with onnx.checker.",
                inner);
    }

    /// <summary>The node ONNX Runtime names, in either of its forms: <c>Node (name)</c> or <c>In Node, ("name", Op, ...</c>.</summary>
    internal static string? NodeName(string message)
    {
        var match = NodeInParentheses().Match(message);
        if (match.Success)
        {
            return match.Groups[1].Value;
        }

        match = NodeTuple().Match(message);
        return match.Success ? match.Groups[1].Value : null;
    }

    /// <summary>The runtime's own sentence without its status prefix, trimmed of the trailing period and bounded in length.</summary>
    private static string Reason(string message)
    {
        var text = StatusPrefix().Replace(message, "").Trim();
        // A kernel's constructor failing nests a second status after a source path and a C++ signature: keep
        // the words before the path and the innermost sentence, not the runtime's file names.
        var source = text.IndexOf("/onnxruntime_src/", StringComparison.Ordinal);
        var inner = text.LastIndexOf("[ONNXRuntimeError]", StringComparison.Ordinal);
        if (source >= 0 && inner > source)
        {
            text = text[..source].Trim() + " " + StatusPrefix().Replace(text[inner..], "").Trim();
        }

        text = Whitespace().Replace(text, " ").TrimEnd('.', ' ');
        return text.Length > 400 ? text[..400] + "..." : text;
    }

    [GeneratedRegex(@"[Nn]ode \(([^)]*)\)")]
    private static partial Regex NodeInParentheses();

    [GeneratedRegex("In Node, \\(\"([^\"]*)\"")]
    private static partial Regex NodeTuple();

    [GeneratedRegex(@"^(\[ONNXRuntimeError\]\s*:\s*\d+\s*:\s*[A-Z_]+\s*:\s*|\[ErrorCode:\w+\]\s*)")]
    private static partial Regex StatusPrefix();

    [GeneratedRegex(@"\s+")]
    private static partial Regex Whitespace();
}

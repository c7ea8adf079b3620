using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// A model with a layer no calibration sample reaches: x [n,4] -> If(sum(x) > -1e6) then MatMul(x, w_then)
/// else MatMul(x, w_else). Every sample takes the then branch, so 'branch/else_branch/fc_else' is not exercised.
/// </summary>
internal static class UncoveredModel
{
    public const string UntakenLayer = "branch/else_branch/fc_else";

    public const int Samples = 32;

    public static byte[] Bytes()
    {
        var then = new GraphBuilder().Node("MatMul", ["x", "w_then"], ["then_out"], "fc_then").Output("then_out", -1, 3).BuildGraph();
        var otherwise = new GraphBuilder().Node("MatMul", ["x", "w_else"], ["else_out"], "fc_else").Output("else_out", -1, 3).BuildGraph();
        return new GraphBuilder()
            .Input("x", -1, 4)
            .Initializer("w_then", [4, 3], GraphBuilder.RandomValues(1, 12))
            .Initializer("w_else", [4, 3], GraphBuilder.RandomValues(2, 12))
            .Initializer("floor", [], [-1e6f])
            .Node("ReduceSum", ["x"], ["total"], "total", GraphBuilder.IntAttribute("keepdims", 0))
            .Node("Greater", ["total", "floor"], ["cond"], "cond")
            .Node("If", ["cond"], ["y"], "branch", GraphBuilder.GraphAttribute("then_branch", then), GraphBuilder.GraphAttribute("else_branch", otherwise))
            .Output("y", -1, 3)
            .ToBytes();
    }

    public static byte[] Dataset()
    {
        using var npz = new MemoryStream();
        NpzWriter.Write(npz, [new NpyArray("x", ElementType.Float32, [Samples, 4], GraphBuilder.RandomValues(3, Samples * 4))]);
        return npz.ToArray();
    }
}

using P = global::Onnx;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Where a 1-D or 2-D Conv reads its input: kernel, strides, dilations and padding per the ONNX Conv definition
/// (auto_pad NOTSET with explicit pads, VALID, SAME_UPPER and SAME_LOWER), so that the unfolded input patches
/// (im2col) are exactly the vectors each output position multiplies with the weight. A 1-D Conv is a 2-D one of
/// height 1.
/// </summary>
internal sealed record ConvGeometry(int Group, int KernelHeight, int KernelWidth, int StrideHeight, int StrideWidth, int DilationHeight, int DilationWidth, int[] Pads, string AutoPad)
{
    /// <summary>The geometry of a Conv node with a weight of <paramref name="weightShape"/>, or null for 3-D and larger convolutions.</summary>
    public static ConvGeometry? Of(P.NodeProto node, IReadOnlyList<long> weightShape)
    {
        var spatial = weightShape.Count - 2;
        if (spatial is not (1 or 2))
        {
            return null;
        }

        long[] Ints(string name, long fallback) =>
            Onnx.ModelChecks.Attribute(node, name) is { } a && a.Ints.Count > 0 ? a.Ints.ToArray() : Enumerable.Repeat(fallback, spatial).ToArray();
        var strides = Ints("strides", 1);
        var dilations = Ints("dilations", 1);
        var pads = Onnx.ModelChecks.Attribute(node, "pads") is { } p && p.Ints.Count == 2 * spatial ? p.Ints.Select(v => (int)v).ToArray() : new int[2 * spatial];
        var autoPad = Onnx.ModelChecks.Attribute(node, "auto_pad")?.S.ToStringUtf8() ?? "NOTSET";
        var group = (int)(Onnx.ModelChecks.Attribute(node, "group")?.I ?? 1);
        return spatial == 1
            ? new ConvGeometry(group, 1, (int)weightShape[2], 1, (int)strides[0], 1, (int)dilations[0], [0, pads[0], 0, pads[1]], autoPad)
            : new ConvGeometry(group, (int)weightShape[2], (int)weightShape[3], (int)strides[0], (int)strides[1], (int)dilations[0], (int)dilations[1], [pads[0], pads[1], pads[2], pads[3]], autoPad);
    }

    /// <summary>Output size and leading pad along one axis.</summary>
    public (int Output, int PadBegin) Axis(int input, int kernel, int stride, int dilation, int padBegin, int padEnd)
    {
        var reach = ((kernel - 1) * dilation) + 1;
        switch (AutoPad)
        {
            case "SAME_UPPER":
            case "SAME_LOWER":
                var output = (input + stride - 1) / stride;
                var total = Math.Max(0, ((output - 1) * stride) + reach - input);
                return (output, AutoPad == "SAME_UPPER" ? total / 2 : total - (total / 2));
            case "VALID":
                return (((input - reach) / stride) + 1, 0);
            default:
                return (((input + padBegin + padEnd - reach) / stride) + 1, padBegin);
        }
    }

    /// <summary>
    /// Writes patches [first, first + count) of group <paramref name="group"/> of one input [N, C, H, W] (or [N, C, W])
    /// column by column: destination[c * count + v] is value c (channel-in-group, kernel row, kernel column, as the
    /// weight [M, C/g, kh, kw] orders them) of patch v; padding reads zero. Patches are numbered (sample, out row, out column).
    /// </summary>
    public void Patches(ReadOnlySpan<float> input, long[] shape, int group, long first, int count, Span<float> destination)
    {
        var (batch, channels, height, width) = shape.Length == 3 ? ((int)shape[0], (int)shape[1], 1, (int)shape[2]) : ((int)shape[0], (int)shape[1], (int)shape[2], (int)shape[3]);
        var perGroup = channels / Group;
        var (outHeight, top) = Axis(height, KernelHeight, StrideHeight, DilationHeight, Pads[0], Pads[2]);
        var (outWidth, left) = Axis(width, KernelWidth, StrideWidth, DilationWidth, Pads[1], Pads[3]);
        for (var v = 0; v < count; v++)
        {
            var patch = first + v;
            var ow = (int)(patch % outWidth);
            var oh = (int)(patch / outWidth % outHeight);
            var n = (int)(patch / outWidth / outHeight);
            var column = 0;
            for (var ci = 0; ci < perGroup; ci++)
            {
                var plane = (((long)n * channels) + (group * perGroup) + ci) * height * width;
                for (var kh = 0; kh < KernelHeight; kh++)
                {
                    var y = (oh * StrideHeight) - top + (kh * DilationHeight);
                    for (var kw = 0; kw < KernelWidth; kw++, column++)
                    {
                        var x = (ow * StrideWidth) - left + (kw * DilationWidth);
                        destination[(column * count) + v] = y >= 0 && y < height && x >= 0 && x < width ? input[(int)(plane + ((long)y * width) + x)] : 0f;
                    }
                }
            }
        }
    }

    /// <summary>Number of patches (output positions over the batch) of an input of <paramref name="shape"/>.</summary>
    public long PatchCount(long[] shape)
    {
        var (height, width) = shape.Length == 3 ? (1, (int)shape[2]) : ((int)shape[2], (int)shape[3]);
        var (outHeight, _) = Axis(height, KernelHeight, StrideHeight, DilationHeight, Pads[0], Pads[2]);
        var (outWidth, _) = Axis(width, KernelWidth, StrideWidth, DilationWidth, Pads[1], Pads[3]);
        return shape[0] * (long)Math.Max(outHeight, 0) * Math.Max(outWidth, 0);
    }
}
